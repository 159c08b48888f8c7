"""Reliability bins and expected calibration error.

Outside source: the ECE of Guo et al. 2017 ("On Calibration of Modern Neural Networks", eq. 3),
computed here directly with numpy over equal-width bins, and a hand-worked example.
"""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from casefile.errors import ValidationError
from casefile.review.calibration import reading_points, reliability


def _numpy_ece(conf, agreed, bins):
    conf, agreed = np.asarray(conf, float), np.asarray(agreed, float)
    idx = np.minimum((conf * bins).astype(int), bins - 1)
    total = 0.0
    for b in range(bins):
        m = idx == b
        if m.any():
            total += m.sum() / len(conf) * abs(agreed[m].mean() - conf[m].mean())
    return total


def test_hand_worked_example():
    # two bins: [0, .5) holds 0.2 (agreed) -> |1 - 0.2| = 0.8; [.5, 1] holds 0.9 (agreed), 0.7 (not):
    # share 0.5, mean 0.8 -> 0.3. ECE = 1/3 * 0.8 + 2/3 * 0.3 = 0.4666...
    r = reliability([(0.2, True), (0.9, True), (0.7, False)], bins=2)
    assert r["ece"] == pytest.approx(0.8 / 3 + 2 * 0.3 / 3)
    assert [b["n"] for b in r["bins"]] == [1, 2] and r["bins"][1]["agree_share"] == 0.5


@given(st.lists(st.tuples(st.floats(0, 1), st.booleans()), min_size=1, max_size=60), st.integers(1, 15))
def test_ece_equals_the_direct_numpy_formula(points, bins):
    r = reliability(points, bins=bins)
    assert r["ece"] == pytest.approx(_numpy_ece([c for c, _ in points], [a for _, a in points], bins), abs=1e-12)
    assert sum(b["n"] for b in r["bins"]) == len(points)


def test_no_points_give_no_ece_and_empty_bins_no_share():
    r = reliability([], bins=5)
    assert r["ece"] is None and r["n"] == 0
    assert all(b["agree_share"] is None for b in r["bins"])


@pytest.mark.parametrize("bins", [0, 101, 2.5, True])
def test_bad_bins_are_refused(bins):
    with pytest.raises(ValidationError, match="whole number from 1 to 100"):
        reliability([(0.5, True)], bins=bins)


def test_confidence_outside_0_1_is_refused():
    with pytest.raises(ValidationError, match="outside 0..1"):
        reliability([(1.5, True)])


def test_unsure_readings_and_cases_without_confidence_are_left_out():
    current = {"a": {"r1": {"verdict": "agree"}, "r2": {"verdict": "unsure"}},
               "b": {"r1": {"verdict": "disagree"}}, "c": {"r1": {"verdict": "agree"}}}
    assert reading_points(current, {"a": 0.9, "b": 0.6, "c": None}) == [(0.9, True), (0.6, False)]


def test_summarise_carries_the_reliability_of_the_ledgers_readings(ledger):
    from casefile.review.readings import record_review
    from casefile.review.stats import summarise

    record_review(ledger, "rv-00001", reader="dr-a", verdict="agree")
    record_review(ledger, "rv-00002", reader="dr-a", verdict="disagree")
    record_review(ledger, "rv-00003", reader="dr-a", verdict="unsure")
    r = summarise(ledger)["reliability"]
    # every fixture case has confidence 0.8: one bin [0.8, 0.9) with one agree of two -> |0.5 - 0.8|
    assert r["n"] == 2 and r["ece"] == pytest.approx(0.3)
    assert [b["n"] for b in r["bins"]][8] == 2


def test_the_stats_text_prints_the_calibration_error_and_no_kappa_without_readings(ledger):
    from casefile.review.readings import record_review
    from casefile.review.stats import summarise
    from casefile.review.text import format_text

    empty = format_text(summarise(ledger))
    assert "model vs reader labels: no readings yet (n = 0 readings)" in empty
    assert "Confidence against readers: no agree or disagree readings yet" in empty
    record_review(ledger, "rv-00001", reader="dr-a", verdict="agree")
    record_review(ledger, "rv-00002", reader="dr-a", verdict="disagree")
    text = format_text(summarise(ledger))
    assert "expected calibration error 0.300 over 10 equal-width bins (n = 2 readings" in text
