"""Occlusion runs in channels-last memory order where the model takes it, gives the map of the definition
either way, and leaves every weight tensor as it found it.

Outside source: the definition of occlusion sensitivity (Zeiler & Fergus 2014) computed directly with
torch in its default memory order, one forward pass per covered image (test_incremental.naive_grid);
PyTorch's documentation of memory formats (``torch.channels_last``: NHWC strides, the same logical
values) for what the order may and may not change. The 1e-5 tolerance on probabilities is the
occlusion issue's requirement.
"""

from __future__ import annotations

import numpy as np
import pytest
import torch
from torch import nn

from casefile.explain._common import channels_last
from casefile.explain.occlusion import occlusion
from tests.explain.test_incremental import naive_grid


class ViewFlatten(nn.Module):
    """A classifier that flattens a 4 x 4 feature map with ``.view``, which a channels-last map refuses."""

    def __init__(self) -> None:
        super().__init__()
        self.conv = nn.Conv2d(1, 3, 3, 2, 1)
        self.head = nn.Linear(3 * 4 * 4, 3)

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        f = torch.relu(self.conv(x))
        return self.head(f.view(f.shape[0], -1))


class Small(nn.Module):
    def __init__(self) -> None:
        super().__init__()
        self.body = nn.Sequential(nn.Conv2d(1, 6, 3, 1, 1), nn.BatchNorm2d(6), nn.ReLU(), nn.MaxPool2d(2),
                                  nn.Conv2d(6, 8, 3, 1, 1), nn.ReLU(), nn.AdaptiveAvgPool2d(1), nn.Flatten(),
                                  nn.Linear(8, 3))

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        return self.body(x)


def _weights(net: nn.Module) -> list[tuple[torch.Tensor, int, torch.Tensor]]:
    return [(p, p.data_ptr(), p.detach().clone()) for p in net.parameters()]


@pytest.mark.parametrize("make", [Small, ViewFlatten])
@pytest.mark.parametrize("mode", ["batched", "incremental"])
def test_the_map_is_the_definitions_and_the_weights_are_left_as_found(make, mode):
    torch.manual_seed(3)
    net = make().eval()
    x = torch.randn(1, 1, 8, 8)
    before = _weights(net)
    r = occlusion(net, x, 0, patch=3, stride=1, mode=mode, return_all=True)
    np.testing.assert_allclose(r.grid_probability, naive_grid(net, x, 0, 3, 1), atol=1e-5)
    for p, ptr, values in before:
        assert p.data_ptr() == ptr and p.is_contiguous() and torch.equal(p.detach(), values)


def test_channels_last_is_used_where_the_model_takes_it_and_not_where_it_does_not():
    torch.manual_seed(3)
    x = torch.randn(1, 1, 8, 8)
    small, flat = Small().eval(), ViewFlatten().eval()
    inner = small.body[4].weight  # [8, 6, 3, 3]: the two orders differ (with one channel they coincide)
    with channels_last(small, x) as (y, _):
        assert y.is_contiguous(memory_format=torch.channels_last)
        assert inner.is_contiguous(memory_format=torch.channels_last) and not inner.is_contiguous()
    assert inner.is_contiguous()
    ptr = flat.conv.weight.data_ptr()
    with channels_last(flat, x) as (y, _):  # its .view refuses the NHWC feature map: it runs as given
        assert y is x and flat.conv.weight.data_ptr() == ptr


def test_weights_come_back_even_when_the_body_raises():
    net = Small().eval()
    ptr = net.body[0].weight.data_ptr()
    with pytest.raises(RuntimeError, match="inside"):
        with channels_last(net, torch.randn(1, 1, 8, 8)):
            raise RuntimeError("inside")
    assert net.body[0].weight.data_ptr() == ptr and net.body[0].weight.is_contiguous()
