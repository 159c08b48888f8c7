"""Wilson interval and Cohen's kappa against reference libraries (scipy, scikit-learn)."""

import math
import warnings

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import binomtest
from sklearn.metrics import cohen_kappa_score

from casefile.review.agreement import cohen_kappa, confusion_table, horvitz_thompson, wilson_interval


@pytest.mark.parametrize(("k", "n"), [(0, 1), (1, 1), (0, 10), (10, 10), (3, 10), (1, 80), (79, 80), (500, 1000)])
def test_wilson_matches_scipy(k, n):
    # reference: scipy.stats.binomtest(k, n).proportion_ci(method="wilson"), 95 %
    ref = binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
    low, high = wilson_interval(k, n)
    assert low == pytest.approx(ref.low, abs=1e-12)
    assert high == pytest.approx(ref.high, abs=1e-12)


@settings(max_examples=60, deadline=None)
@given(st.integers(1, 400).flatmap(lambda n: st.tuples(st.integers(0, n), st.just(n))),
       st.sampled_from([0.8, 0.9, 0.95, 0.99]))
def test_wilson_matches_scipy_property(kn, conf):
    k, n = kn
    ref = binomtest(k, n).proportion_ci(confidence_level=conf, method="wilson")
    low, high = wilson_interval(k, n, conf)
    assert low == pytest.approx(ref.low, abs=1e-12)
    assert high == pytest.approx(ref.high, abs=1e-12)


def _sk_kappa(a, b):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        v = cohen_kappa_score(a, b)
    return None if math.isnan(v) else v


@pytest.mark.parametrize(("a", "b"), [
    (["x", "y", "x", "x"], ["x", "y", "y", "x"]),
    (["x", "y", "z"], ["x", "y", "z"]),              # perfect agreement: 1
    (["x", "y", "x", "y"], ["y", "x", "y", "x"]),    # complete disagreement
    (["x", "x", "x"], ["x", "x", "y"]),              # one rater constant: 0
])
def test_kappa_matches_sklearn(a, b):
    # reference: sklearn.metrics.cohen_kappa_score
    assert cohen_kappa(a, b) == pytest.approx(_sk_kappa(a, b), abs=1e-12)


def test_kappa_undefined_when_both_constant():
    # both raters give one and the same label: chance agreement is 1, kappa is 0/0; sklearn gives nan
    assert _sk_kappa(["x", "x"], ["x", "x"]) is None
    assert cohen_kappa(["x", "x"], ["x", "x"]) is None


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.sampled_from("abc"), st.sampled_from("abc")), min_size=1, max_size=40))
def test_kappa_matches_sklearn_property(pairs):
    a = [x for x, _ in pairs]
    b = [y for _, y in pairs]
    ref = _sk_kappa(a, b)
    ours = cohen_kappa(a, b)
    if ref is None:
        assert ours is None
    else:
        assert ours == pytest.approx(ref, abs=1e-9)


def test_confusion_table_counts():
    t = confusion_table([("a", "a"), ("a", "b"), ("b", "b"), ("a", "b")])
    assert t["labels"] == ["a", "b"]
    assert t["rows"] == {"a": {"a": 1, "b": 2}, "b": {"a": 0, "b": 1}}


def test_horvitz_thompson_census_is_exact():
    # with every unit taken (pi = 1) the estimate is the population mean and the variance 0
    # (Horvitz & Thompson 1952; common practice)
    r = horvitz_thompson([1, 0, 0, 1], [1, 1, 1, 1], 4)
    assert r["estimate"] == 0.5
    assert r["variance"] == 0.0
    r = horvitz_thompson([1, 0], [0.5, 0.5], 4)
    assert r["estimate"] == pytest.approx(0.5)
    assert r["variance"] == pytest.approx((0.5 / 0.25) / 16)
