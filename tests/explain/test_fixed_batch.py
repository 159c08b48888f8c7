"""Models whose batch is fixed at one: occlusion and the checks fall back to one image at a time and give
what a batch-capable copy of the same model gives.

Outside sources: none beyond the model itself. The reference is the same weights run by a module that
takes batches: occlusion of one image must not depend on how the covered copies are grouped (its
definition, Zeiler & Fergus 2014, scores each covered copy on its own).
"""

from __future__ import annotations

import numpy as np
import pytest
import torch
from torch import nn

from casefile.explain import checks as ck
from casefile.explain import occlusion, run

from .conftest import ROI, TinyNet

SMALL = {"occlusion_patch": 8, "occlusion_stride": 4}


class RefusesBatches(nn.Module):
    """Raises on any batch but one, as an archive exported for a static batch of one does."""

    def __init__(self, net: nn.Module) -> None:
        super().__init__()
        self.net = net

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        if x.shape[0] != 1:
            raise RuntimeError(f"expected a batch of 1, got {x.shape[0]}")
        return self.net(x)


class OneRowOut(nn.Module):
    """Answers any batch with one row of scores (its output batch does not follow the input batch)."""

    def __init__(self, net: nn.Module) -> None:
        super().__init__()
        self.net = net

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        return self.net(x).mean(dim=0, keepdim=True)


@pytest.fixture(scope="module")
def net() -> TinyNet:
    torch.manual_seed(4)
    return TinyNet().eval()


@pytest.mark.parametrize("wrapper", [RefusesBatches, OneRowOut])
def test_occlusion_of_a_fixed_batch_model_equals_the_batch_capable_copy(net, wrapper) -> None:
    x = torch.randn(1, 1, 32, 32, generator=torch.Generator().manual_seed(8))
    free = occlusion(net, x, 1, patch=8, stride=4, batch_size=16, return_all=True)
    fixed = occlusion(wrapper(net), x, 1, patch=8, stride=4, batch_size=16, return_all=True)
    assert free.batch_size == 16 and fixed.batch_size == 1
    np.testing.assert_allclose(fixed.logit, free.logit, atol=1e-6)
    np.testing.assert_allclose(fixed.probability, free.probability, atol=1e-6)


@pytest.mark.parametrize("wrapper", [RefusesBatches, OneRowOut])
def test_the_checks_fall_back_too(net, wrapper) -> None:
    x = torch.randn(1, 1, 32, 32, generator=torch.Generator().manual_seed(9))
    attribution = np.random.default_rng(0).random((32, 32)).astype(np.float32)
    a = ck.deletion(net, x, 0, attribution, fill=0.0, settings=SMALL)
    b = ck.deletion(wrapper(net), x, 0, attribution, fill=0.0, settings=SMALL)
    assert b.outcome == a.outcome != "not-run" and b.value == pytest.approx(a.value, abs=1e-5)
    whole_free = run(net, x, labels=["a", "b"], layer="features.5",
                     settings=SMALL, roi=ROI)
    whole_fixed = run(wrapper(net), x, labels=["a", "b"], layer="net.features.5", settings=SMALL, roi=ROI)
    assert whole_fixed.map_params["occlusion"]["batch_size_used"] == 1
    assert [c.outcome for c in whole_fixed.checks] == [c.outcome for c in whole_free.checks]
    np.testing.assert_allclose(whole_fixed.maps["occlusion"], whole_free.maps["occlusion"], atol=1e-6)
