"""Occlusion against the analytic identity of a linear model; coverage of every pixel; the blur fill."""

from __future__ import annotations

import numpy as np
import pytest
import torch
from hypothesis import example, given, settings
from hypothesis import strategies as st
from scipy.ndimage import gaussian_filter
from torch import nn

from casefile.errors import ExplainError
from casefile.explain import occlusion
from casefile.explain.occlusion import fill_image, gaussian_blur, positions


def linear(c: int, h: int, w: int, seed: int = 0) -> nn.Module:
    torch.manual_seed(seed)
    return nn.Sequential(nn.Flatten(), nn.Linear(c * h * w, 3)).double().eval()


@settings(max_examples=12, deadline=None)
@given(
    c=st.integers(1, 3),
    h=st.integers(4, 24),
    w=st.integers(4, 24),
    patch=st.integers(2, 9),
    stride=st.integers(1, 9),
)
@example(c=1, h=20, w=20, patch=8, stride=4)
@example(c=3, h=19, w=23, patch=6, stride=4)  # neither size a multiple of the stride
@example(c=2, h=10, w=13, patch=4, stride=3)
def test_linear_model_logit_drop_is_patch_sum(c: int, h: int, w: int, patch: int, stride: int) -> None:
    # Analytic identity: f(x) = w.x + b, fill 0 -> f(x) - f(x with patch zeroed) = sum over the patch of w.x.
    stride = min(stride, patch)
    ph, pw = min(patch, h), min(patch, w)
    net = linear(c, h, w)
    x = torch.randn(1, c, h, w, dtype=torch.float64)
    res = occlusion(
        net, x, 2, patch=patch, stride=stride, fill=0.0, output="logit", return_all=True, batch_size=5
    )
    wx = (net[1].weight[2].detach().view(c, h, w) * x[0]).sum(dim=0).numpy()
    total, count = np.zeros((h, w)), np.zeros((h, w))
    for i, r in enumerate(res.rows):
        for j, col in enumerate(res.cols):
            s = wx[r : r + ph, col : col + pw].sum()
            assert res.grid_logit[i, j] == pytest.approx(s, rel=1e-5, abs=1e-5)
            total[r : r + ph, col : col + pw] += s
            count[r : r + ph, col : col + pw] += 1
    assert count.min() >= 1  # every pixel covered although the size is not a multiple of the stride
    np.testing.assert_allclose(res.logit, total / count, rtol=1e-5, atol=1e-5)
    only = occlusion(net, x, 2, patch=patch, stride=stride, output="logit")
    np.testing.assert_array_equal(only, res.logit)


@settings(max_examples=40, deadline=None)
@given(size=st.integers(1, 60), patch=st.integers(1, 20), stride=st.integers(1, 20))
def test_positions_cover_every_pixel(size: int, patch: int, stride: int) -> None:
    patch, stride = min(patch, size), min(stride, patch)  # occlusion refuses stride > patch
    starts = positions(size, patch, stride)
    covered = np.zeros(size, dtype=bool)
    for s in starts:
        covered[s : s + patch] = True
    assert covered.all() and starts[0] == 0 and starts[-1] + patch == size
    assert all(b > a for a, b in zip(starts, starts[1:], strict=False))


def test_probability_map_of_a_patch_that_covers_everything() -> None:
    # patch larger than the image: one position; the drop is p(x) - p(fill everywhere).
    net = linear(1, 6, 6, seed=1)
    x = torch.randn(1, 1, 6, 6, dtype=torch.float64)
    m = occlusion(net, x, 0, patch=32, stride=16, fill=0.0)
    with torch.no_grad():
        p = torch.softmax(net(x), 1)[0, 0] - torch.softmax(net(torch.zeros_like(x)), 1)[0, 0]
    np.testing.assert_allclose(m, np.full((6, 6), float(p)), rtol=1e-6)


def test_blur_fill_matches_scipy_gaussian_filter() -> None:
    # Reference library: scipy.ndimage.gaussian_filter, edges 'nearest', truncate 3 sigma (radius 6 for sigma 2).
    x = torch.rand(1, 2, 21, 17, dtype=torch.float64)
    ours = gaussian_blur(x, 2.0)[0].numpy()
    for ch in range(2):
        ref = gaussian_filter(x[0, ch].numpy(), sigma=2.0, mode="nearest", truncate=3.0)
        np.testing.assert_allclose(ours[ch], ref, atol=1e-12)
    mean = fill_image(x, "mean")
    np.testing.assert_allclose(mean[0, :, 3, 4].numpy(), x[0].mean(dim=(1, 2)).numpy())


def test_bad_occlusion_settings_are_clear() -> None:
    net = linear(1, 8, 8)
    x = torch.zeros(1, 1, 8, 8, dtype=torch.float64)
    with pytest.raises(ExplainError, match="occlusion fill: 'grey'"):
        occlusion(net, x, fill="grey")
    with pytest.raises(ExplainError, match="occlusion stride"):
        occlusion(net, x, stride=0)
    with pytest.raises(ExplainError, match="larger than the patch"):
        occlusion(net, x, patch=2, stride=3)
    with pytest.raises(ExplainError, match="occlusion output"):
        occlusion(net, x, output="odds")
