"""Sampling plans: properties (hypothesis), allocation rules and unbiasedness of the risk plan.

Outside sources: Horvitz & Thompson (1952) for the unbiased weighted estimate, Hamilton's largest
remainder method for proportional allocation (common practice), hypothesis for the properties.
"""

import math
import random
import statistics

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from casefile.errors import ValidationError
from casefile.review.agreement import horvitz_thompson
from casefile.review.plans import draw_plan, equal_allocation, largest_remainder

STATUSES = ["pass", "warn", "fail", "not-run"]


def _population(n, seed=1, labels=("normal", "abnormal")):
    rng = random.Random(seed)
    rows = [{"case_id": f"case-{i:04d}", "seq": 2 * i + 1, "label": rng.choice(labels),
             "status": rng.choice(STATUSES), "model_name": "m", "model_version": "1",
             "confidence": 0.9, "recorded_at": "2024-01-01T00:00:00Z"} for i in range(n)]
    for r in rows:  # a fail flags (every check here flags on fail); a warn only sometimes does
        r["flagged"] = 1 if r["status"] == "fail" or (r["status"] == "warn" and rng.random() < 0.3) else 0
    return rows


populations = st.builds(_population, st.integers(1, 60), st.integers(0, 10_000))


def _check_members(draw, pop):
    seqs = [m["seq"] for m in draw["members"]]
    assert len(seqs) == len(set(seqs)), "a draw never contains duplicates"
    by_seq = {r["seq"]: r["case_id"] for r in pop}
    for m in draw["members"]:
        assert by_seq[m["seq"]] == m["case_id"], "members are a subset of the population"
        assert 0 < m["inclusion_probability"] <= 1
    assert seqs == sorted(seqs)
    assert draw["population_size"] == len(pop)


@settings(max_examples=40, deadline=None)
@given(populations, st.integers(1, 80), st.integers(0, 2**32))
def test_random_plan_properties(pop, size, seed):
    d = draw_plan("random", pop, size=size, seed=seed)
    _check_members(d, pop)
    assert len(d["members"]) == min(len(pop), size)


@settings(max_examples=40, deadline=None)
@given(populations, st.integers(1, 80), st.integers(0, 2**32), st.sampled_from(["proportional", "equal"]),
       st.sampled_from(["label", "status", "label+status"]))
def test_stratified_plan_properties(pop, size, seed, allocation, strata):
    d = draw_plan("stratified", pop, size=size, seed=seed, allocation=allocation, strata=strata)
    _check_members(d, pop)
    assert len(d["members"]) == min(len(pop), size)


@settings(max_examples=40, deadline=None)
@given(populations, st.floats(0.01, 1.0), st.integers(0, 2**32), st.integers(1, 12))
def test_risk_plan_takes_every_flagged_case_and_the_minimum_of_the_rest(pop, share, seed, minimum):
    d = draw_plan("risk", pop, share=share, seed=seed, minimum=minimum)
    _check_members(d, pop)
    flagged = {r["seq"] for r in pop if r["flagged"]}
    taken = {m["seq"]: m["inclusion_probability"] for m in d["members"]}
    assert flagged <= set(taken)
    assert all(taken[s] == 1.0 for s in flagged)
    # the unflagged stratum: a simple random sample of ceil(share * N_u), never fewer than the minimum
    # (or all of them), each with inclusion probability n_u / N_u
    rest = [r["seq"] for r in pop if not r["flagged"]]
    drawn = [s for s in rest if s in taken]
    assert len(drawn) == min(len(rest), max(minimum, math.ceil(share * len(rest) - 1e-9)))
    assert all(taken[s] == pytest.approx(len(drawn) / len(rest)) for s in drawn)
    assert d["strata"] == {"flagged": {"size": len(flagged), "drawn": len(flagged)},
                           "unflagged": {"size": len(rest), "drawn": len(drawn)}}


def test_risk_plan_draws_by_flags_not_by_any_warn():
    # a warn that flags nothing (e.g. method agreement, a note) leaves the case in the sampled stratum
    pop = [{"case_id": f"c{i}", "seq": i + 1, "label": "x", "status": "warn", "flagged": int(i < 3)}
           for i in range(40)]
    d = draw_plan("risk", pop, share=0.1, seed=0)
    flagged = [m for m in d["members"] if m["stratum"] == "flagged"]
    assert [m["seq"] for m in flagged] == [1, 2, 3]
    assert sum(1 for m in d["members"] if m["stratum"] == "unflagged") == 5  # ceil(3.7) = 4 < minimum 5


@settings(max_examples=30, deadline=None)
@given(st.integers(2, 300), st.sampled_from([0.65, 1.0, 2.5, 4.0]), st.sampled_from(["I", "II", "III"]))
def test_lot_plan_properties(n, aql, level):
    pop = _population(n)
    d = draw_plan("lot", pop, aql=aql, level=level, seed=3)
    _check_members(d, pop)
    assert len(d["members"]) == d["lot"]["sample_size"] == min(n, d["lot"]["table_sample_size"])


def test_same_seed_same_list_other_seed_other_list():
    pop = _population(200)
    a = draw_plan("random", pop, size=20, seed=7)
    b = draw_plan("random", list(reversed(pop)), size=20, seed=7)  # input order does not matter
    c = draw_plan("random", pop, size=20, seed=8)
    assert a == b
    assert a["members"] != c["members"]


def test_documented_algorithm_redraws_by_hand():
    # The docstring of casefile.review.plans describes the algorithm; follow it with the stdlib only.
    pop = _population(50)
    rng = random.Random(11)
    keys = [rng.random() for _ in pop]
    order = sorted(range(len(pop)), key=lambda i: (keys[i], pop[i]["seq"]))
    expected = sorted(pop[i]["seq"] for i in order[:5])
    assert [m["seq"] for m in draw_plan("random", pop, size=5, seed=11)["members"]] == expected


def test_largest_remainder_allocation():
    # Hamilton's (largest remainder) method, common practice: 10 over sizes 5/3/2 of 10 -> exact quotas;
    # 7 over 50/30/20 -> quotas 3.5, 2.1, 1.4 -> floors 3, 2, 1, one more to the largest remainder (a).
    assert largest_remainder(10, {"a": 5, "b": 3, "c": 2}) == {"a": 5, "b": 3, "c": 2}
    assert largest_remainder(7, {"a": 50, "b": 30, "c": 20}) == {"a": 4, "b": 2, "c": 1}
    assert sum(largest_remainder(13, {"a": 7, "b": 7, "c": 7}).values()) == 13


def test_equal_allocation_hands_on_overflow():
    assert equal_allocation(9, {"a": 100, "b": 100, "c": 100}) == {"a": 3, "b": 3, "c": 3}
    assert equal_allocation(9, {"a": 1, "b": 100, "c": 100}) == {"a": 1, "b": 4, "c": 4}
    assert equal_allocation(10, {"a": 2, "b": 3}) == {"a": 2, "b": 3}


def test_stratified_inclusion_probability_is_n_h_over_N_h():
    pop = _population(100)
    d = draw_plan("stratified", pop, size=10, seed=2, strata="label")
    sizes = {}
    for r in pop:
        sizes[r["label"]] = sizes.get(r["label"], 0) + 1
    taken = {}
    for m in d["members"]:
        taken[m["stratum"]] = taken.get(m["stratum"], 0) + 1
    for m in d["members"]:
        assert m["inclusion_probability"] == pytest.approx(taken[m["stratum"]] / sizes[m["stratum"]])


def _two_strata(n=500, flagged_n=50):
    # 500 cases: 50 flagged of which 30 disagree, 450 others of which 22 disagree; truth 52/500.
    pop, y = [], {}
    for i in range(n):
        flagged = i < flagged_n
        pop.append({"case_id": f"c{i}", "seq": i + 1, "label": "x", "status": "warn" if flagged else "pass",
                    "flagged": int(flagged)})
        y[i + 1] = 1 if (i < 30 or 50 <= i < 72) else 0
    return pop, y, 52 / 500


def test_risk_plan_horvitz_thompson_is_unbiased_naive_is_not():
    # Horvitz & Thompson (1952): sum y/pi over the sample / N is unbiased for any design with pi > 0,
    # here the flagged census plus a simple random sample of the rest; the naive sample share is not.
    pop, y, truth = _two_strata()
    ht, naive = [], []
    for seed in range(2000):
        d = draw_plan("risk", pop, share=0.1, seed=seed)
        ys = [y[m["seq"]] for m in d["members"]]
        ht.append(horvitz_thompson(ys, [m["inclusion_probability"] for m in d["members"]], len(pop))["estimate"])
        naive.append(sum(ys) / len(ys))
    se_ht = statistics.stdev(ht) / len(ht) ** 0.5
    se_naive = statistics.stdev(naive) / len(naive) ** 0.5
    assert abs(statistics.fmean(ht) - truth) < 2 * se_ht
    assert abs(statistics.fmean(naive) - truth) > 20 * se_naive


def test_older_bernoulli_risk_draws_redraw_and_stay_unbiased():
    # draws recorded by older releases (no minimum): Bernoulli sampling by status, Poisson variance
    pop, y, truth = _two_strata()
    ht, naive, var = [], [], []
    for seed in range(2000):
        d = draw_plan("risk", pop, share=0.1, seed=seed, minimum=None)
        ys = [y[m["seq"]] for m in d["members"]]
        r = horvitz_thompson(ys, [m["inclusion_probability"] for m in d["members"]], len(pop))
        ht.append(r["estimate"])
        var.append(r["variance"])
        naive.append(sum(ys) / len(ys))
    se_ht = statistics.stdev(ht) / len(ht) ** 0.5
    se_naive = statistics.stdev(naive) / len(naive) ** 0.5
    assert abs(statistics.fmean(ht) - truth) < 2 * se_ht
    assert abs(statistics.fmean(naive) - truth) > 20 * se_naive
    # the Poisson-sampling variance estimate is unbiased too: its mean is near the spread of estimates
    assert statistics.fmean(var) == pytest.approx(statistics.variance(ht), rel=0.15)


@pytest.mark.parametrize(("plan", "kwargs", "words"), [
    ("nearest", {}, "not one of"),
    ("random", {"size": 0}, "size"),
    ("random", {"size": 3, "seed": -1}, "seed"),
    ("stratified", {"size": 3, "allocation": "optimal"}, "allocation"),
    ("risk", {"share": 1.5}, "share"),
    ("lot", {}, "AQL"),
])
def test_bad_options_are_refused(plan, kwargs, words):
    with pytest.raises(ValidationError, match=words):
        draw_plan(plan, _population(10), **kwargs)


def test_empty_population_is_refused():
    with pytest.raises(ValidationError, match="no cases"):
        draw_plan("random", [], size=3)
