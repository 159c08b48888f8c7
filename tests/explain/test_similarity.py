"""Spearman and SSIM against the reference libraries (scipy.stats.spearmanr, skimage structural_similarity)."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import spearmanr
from skimage.metrics import structural_similarity

from casefile.explain import spearman, ssim
from casefile.explain.similarity import area_resample


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.integers(-5, 5), st.floats(-10, 10, allow_nan=False)), min_size=3, max_size=40))
def test_spearman_equals_scipy(pairs: list[tuple[int, float]]) -> None:
    # Reference library: scipy.stats.spearmanr (ties get average ranks); integers force many ties.
    a = np.array([p[0] for p in pairs], dtype=float)
    b = np.array([p[1] for p in pairs], dtype=float)
    ours = spearman(a, b)
    if np.ptp(a) == 0 or np.ptp(b) == 0:
        assert ours is None  # undefined: scipy returns nan here
        return
    ref = spearmanr(a, b).statistic
    assert ours is not None and abs(ours - ref) < 1e-9


def test_spearman_undefined_cases() -> None:
    assert spearman(np.zeros(10), np.arange(10.0)) is None
    assert spearman(np.array([1.0, np.nan, 2.0]), np.arange(3.0)) is None
    assert spearman(np.arange(5.0), -np.arange(5.0)) == -1.0


def test_ssim_equals_skimage() -> None:
    # Reference library: skimage.metrics.structural_similarity, defaults (7x7 uniform window,
    # K1 0.01, K2 0.03, sample covariance) with data_range given.
    rng = np.random.default_rng(0)
    a = rng.random((24, 30))
    b = np.clip(a + 0.2 * rng.standard_normal(a.shape), 0, 1)
    for x, y in ((a, b), (a, a), (a, 1 - a)):
        ref = structural_similarity(x, y, data_range=1.0)
        assert abs(ssim(x, y, data_range=1.0) - ref) < 1e-10


def test_area_resample_is_block_mean() -> None:
    m = np.arange(16.0).reshape(4, 4)
    np.testing.assert_allclose(area_resample(m, (2, 2)), [[2.5, 4.5], [10.5, 12.5]])
