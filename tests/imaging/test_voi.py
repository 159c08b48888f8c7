"""Window functions at hand-computed points of DICOM PS3.3 C.11.2.1.2 / C.11.2.1.3, and LUT lookups."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from casefile.imaging import apply_window, lut_lookup, window_linear, window_linear_exact, window_sigmoid


def at(fn, x: float, c: float, w: float) -> float:
    return float(fn(np.array([x]), c, w)[0])


def test_linear_hand_points() -> None:
    # PS3.3 C.11.2.1.2.1, c = 40, w = 400, output 0..1:
    # lower bound c - 0.5 - (w-1)/2 = 39.5 - 199.5 = -160; upper bound c - 0.5 + (w-1)/2 = 239
    assert at(window_linear, -160, 40, 400) == 0.0  # x <= -160 -> ymin (the bound itself is included)
    assert at(window_linear, -1000, 40, 400) == 0.0  # lower clamp
    assert at(window_linear, 239.0001, 40, 400) == 1.0  # x > 239 -> ymax
    assert at(window_linear, 3000, 40, 400) == 1.0  # upper clamp
    # x = 239 is not > 239: ((239 - 39.5) / 399 + 0.5) = 199.5 / 399 + 0.5 = 1.0 exactly
    assert at(window_linear, 239, 40, 400) == pytest.approx(1.0)
    # x = c - 0.5 = 39.5 -> (0 / 399 + 0.5) = 0.5: the c - 0.5 term puts mid-grey half a step low
    assert at(window_linear, 39.5, 40, 400) == pytest.approx(0.5)
    # x = 40 -> (0.5 / 399 + 0.5) = 0.50125313...
    assert at(window_linear, 40, 40, 400) == pytest.approx(0.5 + 0.5 / 399)
    # x = 0 -> ((0 - 39.5) / 399 + 0.5) = 0.40100250...; the w - 1 divisor, not w
    assert at(window_linear, 0, 40, 400) == pytest.approx(-39.5 / 399 + 0.5)
    assert at(window_linear, 0, 40, 400) != pytest.approx(-40 / 400 + 0.5)


def test_linear_width_one_is_a_threshold() -> None:
    # PS3.3 C.11.2.1.2.1: width >= 1. With w = 1 both bounds are c - 0.5 = 99.5 for c = 100.
    x = np.array([99.0, 99.5, 99.5001, 100.0, 101.0])
    with np.errstate(divide="raise", invalid="raise"):  # a division by w - 1 = 0 would raise here
        y = window_linear(x, 100, 1)
    assert y.tolist() == [0.0, 0.0, 1.0, 1.0, 1.0]


def test_linear_refuses_width_below_one() -> None:
    with pytest.raises(ValueError, match="below 1"):
        window_linear(np.zeros(2), 0, 0.5)  # PS3.3 C.11.2.1.2.1: width >= 1


def test_linear_exact_hand_points() -> None:
    # PS3.3 C.11.2.1.3.2, c = 40, w = 400: bounds c - w/2 = -160 and c + w/2 = 240
    assert at(window_linear_exact, -160, 40, 400) == 0.0  # x <= -160 -> ymin
    assert at(window_linear_exact, -500, 40, 400) == 0.0
    assert at(window_linear_exact, 240, 40, 400) == pytest.approx(1.0)  # (200 / 400 + 0.5) = 1
    assert at(window_linear_exact, 241, 40, 400) == 1.0  # upper clamp
    assert at(window_linear_exact, 40, 40, 400) == 0.5  # (0 / 400 + 0.5): no half-step shift
    assert at(window_linear_exact, 0, 40, 400) == pytest.approx(0.4)  # (-40 / 400 + 0.5)
    # width may be below 1 for LINEAR_EXACT (> 0): c = 10, w = 0.5 -> x = 10.125 gives 0.75
    assert at(window_linear_exact, 10.125, 10, 0.5) == pytest.approx(0.75)
    with pytest.raises(ValueError):
        window_linear_exact(np.zeros(1), 0, 0)


def test_sigmoid_hand_points() -> None:
    # PS3.3 C.11.2.1.3.1: y = 1 / (1 + exp(-4 (x - c) / w)); c = 40, w = 400
    assert at(window_sigmoid, 40, 40, 400) == pytest.approx(0.5)  # exp(0) = 1 -> 1/2
    # x = c + w/4 = 140 -> 1 / (1 + e^-1) = 0.7310585786...
    assert at(window_sigmoid, 140, 40, 400) == pytest.approx(1 / (1 + math.exp(-1)))
    assert at(window_sigmoid, 140, 40, 400) == pytest.approx(0.7310585786, abs=1e-9)
    # x = c - w/2 = -160 -> 1 / (1 + e^2) = 0.1192029220...
    assert at(window_sigmoid, -160, 40, 400) == pytest.approx(0.1192029220, abs=1e-9)
    # far below: no overflow warning, limit 0
    with np.errstate(over="raise"):
        assert at(window_sigmoid, -1e6, 40, 1) == 0.0
    with pytest.raises(ValueError):
        window_sigmoid(np.zeros(1), 0, -1)


def test_unknown_function_refused() -> None:
    with pytest.raises(ValueError, match="unknown VOI LUT Function"):
        apply_window(np.zeros(1), 0, 10, "GAMMA")


@settings(max_examples=40, deadline=None)
@given(
    x=st.lists(st.floats(-5000, 5000), min_size=1, max_size=20),
    c=st.floats(-2000, 2000),
    w=st.floats(1, 4000),
    fn=st.sampled_from(["LINEAR", "LINEAR_EXACT", "SIGMOID"]),
)
def test_window_is_monotone_and_bounded(x: list[float], c: float, w: float, fn: str) -> None:
    # PS3.3 C.11.2.1.2: each VOI function is non-decreasing and maps into [ymin, ymax]
    xs = np.sort(np.array(x))
    y = apply_window(xs, c, w, fn)
    assert np.all((y >= 0) & (y <= 1))
    assert np.all(np.diff(y) >= -1e-12)


def test_lut_lookup_clamps_both_ends() -> None:
    # PS3.3 C.11.2.1.1: values below the first mapped value take the first entry, above take the last
    descriptor = [4, 10, 16]  # 4 entries, first mapped value 10
    table = [100, 200, 300, 400]
    out = lut_lookup(np.array([0, 10, 11, 13, 99]), descriptor, table)
    assert out.tolist() == [100, 100, 200, 400, 400]
