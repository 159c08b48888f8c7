"""The risk plan's population interval never overstates: a simulation of 2,000 draws, and the bounds rule.

Outside sources: the true rate of the invented population below is known by construction; coverage
is the share of draws whose 95 % interval holds it (the definition of a confidence interval). The
per-stratum intervals are checked against scipy in test_stats.py and test_agreement.py.
"""

import pytest

from casefile.review.plans import draw_plan
from casefile.review.stats import summarise_data

DRAW = "d-00000000000c"


def _population():
    # 500 cases: 50 flagged (30 disagree), 450 unflagged of which 22 disagree, a known non-zero rate
    # of 22/450 = 4.9 %; the population rate is 52/500 = 10.4 %.
    pop, disagrees = [], {}
    for i in range(500):
        pop.append({"case_id": f"c{i:03d}", "seq": i + 1, "label": "x", "status": "pass", "flagged": int(i < 50)})
        disagrees[f"c{i:03d}"] = i < 30 or 50 <= i < 72
    return pop, disagrees, 52 / 500


def _interval(pop, disagrees, seed, share):
    d = draw_plan("risk", pop, share=share, seed=seed)
    body = {"draw_id": DRAW, "plan": "risk", "population_size": d["population_size"], "members": d["members"],
            "strata": d["strata"], "options": d["options"]}
    reads = [{"case_id": m["case_id"], "reader": "r1", "draw_id": DRAW,
              "verdict": "disagree" if disagrees[m["case_id"]] else "agree"} for m in d["members"]]
    return summarise_data([body], reads, {c: "x" for c in disagrees})["draws"][0]["weighted"]


@pytest.mark.parametrize("share", [0.1, 0.02])  # 45 and 9 unflagged cases drawn
def test_interval_covers_the_true_rate_in_at_least_93_percent_of_2000_draws(share):
    pop, disagrees, truth = _population()
    covered, point = 0, 0
    for seed in range(2000):
        w = _interval(pop, disagrees, seed, share)
        low, high = w["interval_95"]
        covered += low <= truth <= high
        point += high - low <= 0
    assert covered / 2000 >= 0.93
    assert point == 0  # no draw reports a zero-width interval


def test_a_sampled_stratum_with_too_few_reads_gives_bounds_not_an_estimate():
    pop, disagrees, truth = _population()
    d = draw_plan("risk", pop, share=0.02, seed=3, minimum=3)  # 9 unflagged drawn
    members = d["members"]
    body = {"draw_id": DRAW, "plan": "risk", "population_size": 500, "members": members, "strata": d["strata"],
            "options": {**d["options"], "minimum": 12}}  # a draw that asked for 12 but holds 9
    reads = [{"case_id": m["case_id"], "reader": "r1", "draw_id": DRAW,
              "verdict": "disagree" if disagrees[m["case_id"]] else "agree"} for m in members]
    w = summarise_data([body], reads, {c: "x" for c in disagrees})["draws"][0]["weighted"]
    assert w["estimate"] is None and w["interval_method"] == "bounds"
    low, high = w["interval_95"]
    assert low == pytest.approx(30 / 500) and high == pytest.approx(30 / 500 + 450 / 500)
    assert low <= truth <= high
    assert w["warning"].startswith("no point estimate: stratum 'unflagged' (450 cases, 9 reviewed)")
    assert "\n" not in w["warning"]
