"""Grad-CAM against CAM, gradient saliency of a linear model, and the model left untouched."""

from __future__ import annotations

import numpy as np
import pytest
import torch
import torch.nn.functional as F
from torch import nn

from casefile.errors import ExplainError
from casefile.explain import gradcam, gradient, occlusion, run

from .conftest import TinyNet


def cam(net: TinyNet, x: torch.Tensor, target: int) -> np.ndarray:
    """Class activation map (Zhou et al. 2016): sum_k w_ck A^k at the last feature layer, ReLU'd."""
    with torch.no_grad():
        a = net.features(x)[0]
        m = torch.einsum("k,khw->hw", net.head.weight[target], a)
    return F.relu(m).numpy()


@pytest.mark.parametrize("channels", [1, 3])
def test_gradcam_equals_cam_on_gap_linear_model(channels: int) -> None:
    # Selvaraju et al. 2017, sec. 3.1: with global-average-pool + linear head, Grad-CAM = CAM / Z
    # (Z = number of positions), i.e. equal after normalising both to max 1.
    torch.manual_seed(3)
    net = TinyNet(channels=channels, gap=True).eval()
    x = torch.randn(1, channels, 32, 32)
    for target in (0, 1):
        full, raw = gradcam(net, x, target, layer="features.5", return_raw=True)
        ref = cam(net, x, target)
        assert raw.shape == (16, 16) and full.shape == (32, 32) and full.dtype == np.float32
        assert ref.max() > 0
        np.testing.assert_allclose(raw / raw.max(), ref / ref.max(), atol=1e-5)
        up = F.interpolate(
            torch.from_numpy(ref)[None, None], size=(32, 32), mode="bilinear", align_corners=False
        )[0, 0]
        up = up.numpy()
        np.testing.assert_allclose(full / full.max(), up / up.max(), atol=1e-5)


def test_gradcam_without_gap_head_and_default_target() -> None:
    torch.manual_seed(4)
    net = TinyNet(gap=False).eval()
    x = torch.randn(1, 1, 32, 32)
    m = gradcam(net, x, layer="features.4")
    predicted = int(net(x).argmax())
    np.testing.assert_array_equal(m, gradcam(net, x, predicted, layer="features.4"))
    assert m.shape == (32, 32) and np.all(m >= 0) and np.all(np.isfinite(m))


def test_gradient_saliency_of_linear_model_is_abs_weight() -> None:
    # Analytic identity: for f(x) = w.x + b, d f_t / d x = w_t; saliency = max over channels of |w_t|.
    torch.manual_seed(5)
    c, h, w = 3, 9, 7
    net = nn.Sequential(nn.Flatten(), nn.Linear(c * h * w, 2)).double()
    x = torch.randn(1, c, h, w, dtype=torch.float64)
    sal = gradient(net, x, 1)
    expected = net[1].weight[1].detach().view(c, h, w).abs().amax(dim=0).numpy()
    np.testing.assert_allclose(sal, expected, rtol=1e-6)


def test_bad_layer_and_input_give_one_line_errors() -> None:
    net = TinyNet().eval()
    with pytest.raises(ExplainError, match="layer 'nope': not found"):
        gradcam(net, torch.zeros(1, 1, 32, 32), layer="nope")
    with pytest.raises(ExplainError, match=r"input: expected shape \[1, C, H, W\]"):
        gradcam(net, torch.zeros(1, 32, 32), layer="features.5")
    with pytest.raises(ExplainError, match="target: class index 5"):
        gradient(net, torch.zeros(1, 1, 32, 32), 5)


def test_every_method_leaves_the_model_bit_identical() -> None:
    # Model in TRAIN mode with BatchNorm: a forward pass in train mode would change running stats.
    torch.manual_seed(6)
    net = TinyNet()
    net.train()
    net.features[0].weight.requires_grad_(False)
    net.features[1].eval()  # a mixed set of modes must come back exactly as it was
    before = {k: v.clone() for k, v in net.state_dict().items()}
    modes = [m.training for m in net.modules()]
    flags = [p.requires_grad for p in net.parameters()]
    x = torch.randn(1, 1, 32, 32)
    calls = [
        lambda: gradcam(net, x, layer="features.5"),
        lambda: gradient(net, x),
        lambda: occlusion(net, x, patch=8, stride=4, fill="blur"),
        lambda: run(
            net,
            x,
            labels=["a", "b"],
            layer="features.5",
            settings={"occlusion_patch": 8, "occlusion_stride": 8},
        ),
    ]
    for call in calls:
        call()
        after = net.state_dict()
        assert before.keys() == after.keys()
        assert all(torch.equal(before[k], after[k]) for k in before)
        assert [m.training for m in net.modules()] == modes
        assert [p.requires_grad for p in net.parameters()] == flags
        assert all(p.grad is None for p in net.parameters())


def test_gradient_methods_work_inside_no_grad_and_inference_mode() -> None:
    # Callers often wrap inference in no_grad / inference_mode; the maps must not depend on it.
    torch.manual_seed(7)
    net = TinyNet().eval()
    x = torch.randn(1, 1, 32, 32)
    ref_cam, ref_sal = gradcam(net, x, 1, layer="features.5"), gradient(net, x, 1)
    with torch.no_grad():
        np.testing.assert_array_equal(gradcam(net, x, 1, layer="features.5"), ref_cam)
    with torch.inference_mode():
        xi = x.clone()
        np.testing.assert_array_equal(gradcam(net, xi, 1, layer="features.5"), ref_cam)
        np.testing.assert_array_equal(gradient(net, xi, 1), ref_sal)
