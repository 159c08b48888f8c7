"""Comparing maps: Spearman rank correlation, SSIM, and area-averaged resampling to a common grid."""

from __future__ import annotations

import numpy as np
import torch
import torch.nn.functional as F
from scipy.ndimage import uniform_filter
from scipy.stats import rankdata


def spearman(a: np.ndarray, b: np.ndarray) -> float | None:
    """Spearman's rank correlation of two equally sized arrays (ties get their average rank).

    Returns None when it is undefined: either array constant, fewer than two values, or any value
    not finite.
    """
    fa = np.asarray(a, dtype=np.float64).ravel()
    fb = np.asarray(b, dtype=np.float64).ravel()
    if fa.shape != fb.shape:
        raise ValueError(f"spearman: arrays differ in size ({fa.size} vs {fb.size})")
    if fa.size < 2 or not (np.all(np.isfinite(fa)) and np.all(np.isfinite(fb))):
        return None
    ra = rankdata(fa) - (fa.size + 1) / 2.0
    rb = rankdata(fb) - (fb.size + 1) / 2.0
    den = float(np.sqrt(np.dot(ra, ra) * np.dot(rb, rb)))
    if den == 0.0:
        return None
    return float(np.clip(np.dot(ra, rb) / den, -1.0, 1.0))


def ssim(a: np.ndarray, b: np.ndarray, *, data_range: float, win_size: int = 7) -> float:
    """Mean structural similarity (Wang et al. 2004) of two 2-D maps with a uniform window.

    Same conventions as scikit-image's defaults: K1 = 0.01, K2 = 0.03, sample covariance,
    a border of (win_size - 1) / 2 left out of the mean.
    """
    x = np.asarray(a, dtype=np.float64)
    y = np.asarray(b, dtype=np.float64)
    if x.shape != y.shape or x.ndim != 2:
        raise ValueError(f"ssim: expected two 2-D maps of one shape, got {x.shape} and {y.shape}")
    if min(x.shape) < win_size or win_size % 2 == 0:
        raise ValueError(f"ssim: window {win_size} must be odd and fit in a map of shape {x.shape}")
    n = win_size**2
    norm = n / (n - 1.0)
    ux, uy = uniform_filter(x, win_size), uniform_filter(y, win_size)
    vx = norm * (uniform_filter(x * x, win_size) - ux * ux)
    vy = norm * (uniform_filter(y * y, win_size) - uy * uy)
    vxy = norm * (uniform_filter(x * y, win_size) - ux * uy)
    c1, c2 = (0.01 * data_range) ** 2, (0.03 * data_range) ** 2
    s = ((2 * ux * uy + c1) * (2 * vxy + c2)) / ((ux * ux + uy * uy + c1) * (vx + vy + c2))
    pad = (win_size - 1) // 2
    return float(s[pad:-pad, pad:-pad].mean())


def area_resample(m: np.ndarray, shape: tuple[int, int]) -> np.ndarray:
    """Area-averaged resampling of a 2-D map to ``shape`` (each output cell = mean of the pixels it covers)."""
    t = torch.as_tensor(np.asarray(m, dtype=np.float64))[None, None]
    return F.adaptive_avg_pool2d(t, tuple(int(s) for s in shape))[0, 0].numpy()
