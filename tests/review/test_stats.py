"""summarise / format_text: rates, weighted estimates, kappa, lot decisions and pending reviews.

Outside sources: Horvitz & Thompson (1952) estimate and its Poisson-sampling variance, worked by hand
in the comments; the Wilson interval and Cohen's kappa are checked against libraries in test_agreement.py.
"""

import pytest
from scipy.stats import binomtest
from sklearn.metrics import cohen_kappa_score

from casefile.canonical import canonical_bytes
from casefile.review.readings import record_review
from casefile.review.stats import describe_draw, format_text, summarise, summarise_data
from casefile.review.store import draw


def _rev(case_id, reader, verdict, label=None):
    r = {"case_id": case_id, "reader": reader, "verdict": verdict}
    if label:
        r["label"] = label
    return r


def _risk_body(flagged, unflagged, size_unflagged, draw_id="d-000000000001"):
    members = [{"case_id": c, "seq": i + 1, "inclusion_probability": 1.0, "stratum": "flagged"}
               for i, c in enumerate(flagged)]
    members += [{"case_id": c, "seq": 100 + i, "inclusion_probability": len(unflagged) / size_unflagged,
                 "stratum": "unflagged"} for i, c in enumerate(unflagged)]
    return {"draw_id": draw_id, "plan": "risk", "population_size": len(flagged) + size_unflagged,
            "options": {"minimum": 5, "share": 0.5}, "members": members,
            "strata": {"flagged": {"size": len(flagged), "drawn": len(flagged)},
                       "unflagged": {"size": size_unflagged, "drawn": len(unflagged)}}}


def test_risk_draw_weighted_estimate_by_hand():
    # N = 10: the flagged stratum (2 cases) read in full, 1 of 2 disagree; 5 of the 8 unflagged drawn,
    # 1 of 5 disagree. Stratified estimate (= Horvitz-Thompson with pi = n_h / N_h):
    # (2/10)(1/2) + (8/10)(1/5) = 0.26. With one sampled stratum MOVER is that stratum's Wilson interval
    # scaled by its weight: 0.1 + 0.8 * [l, u], continuity-corrected Wilson (1, 5) from scipy.
    body = _risk_body(["a", "b"], ["c", "d", "e", "f", "g"], 8)
    reviews = [_rev("a", "r1", "disagree", "y"), _rev("b", "r1", "agree"), _rev("c", "r1", "disagree"),
               *(_rev(c, "r1", "agree") for c in "defg")]
    reviews = [{**r, "draw_id": body["draw_id"]} for r in reviews]
    s = summarise_data([body], reviews, {c: "x" for c in "abcdefg"})
    w = s["draws"][0]["weighted"]
    ci = binomtest(1, 5).proportion_ci(method="wilsoncc")  # reference: scipy
    assert w["estimate"] == pytest.approx(0.26)
    assert w["interval_95"] == pytest.approx([0.1 + 0.8 * ci.low, 0.1 + 0.8 * ci.high], abs=1e-12)
    assert w["reviewed"] == 7 and w["n_of"] == "cases" and "warning" not in w
    assert s["draws"][0]["rate"] == pytest.approx(2 / 7)
    # with a member unread for this draw the weighted estimate waits
    s = summarise_data([body], reviews[:6], {c: "x" for c in "abcdefg"})
    assert s["draws"][0]["weighted"]["estimate"] is None
    assert s["draws"][0]["pending"] == ["g"]


def test_zero_disagreements_in_the_sampled_stratum_never_give_a_point_interval():
    # 0 of 5 unflagged disagree: the old Poisson variance was 0 and the interval one point; the
    # continuity-corrected Wilson bound for 0 of 5 (scipy) keeps the population interval open
    body = _risk_body(["a", "b"], ["c", "d", "e", "f", "g"], 8)
    reviews = [{**_rev(c, "r1", "agree"), "draw_id": body["draw_id"]} for c in "abcdefg"]
    w = summarise_data([body], reviews, {c: "x" for c in "abcdefg"})["draws"][0]["weighted"]
    ci = binomtest(0, 5).proportion_ci(method="wilsoncc")
    assert w["estimate"] == 0.0 and ci.high > 0.4
    assert w["interval_95"] == pytest.approx([0.0, 0.8 * ci.high], abs=1e-12)


def test_an_older_risk_draw_with_no_unflagged_member_gives_bounds_and_a_warning():
    # a Bernoulli draw by an older release that drew none of the 12 unflagged cases (the demo's old
    # draw): the unflagged rate is only known to lie in [0, 1], so the population rate lies between
    # (68/80)(18/68) and that plus 12/80, with no estimate and a warning naming the stratum
    members = [{"case_id": f"f{i}", "seq": i + 1, "inclusion_probability": 1, "stratum": "flagged"}
               for i in range(68)]
    body = {"draw_id": "d-00000000000a", "plan": "risk", "population_size": 80, "options": {"share": 0.2},
            "members": members}
    reviews = [{**_rev(f"f{i}", "sim", "disagree" if i < 18 else "agree"), "draw_id": body["draw_id"]}
               for i in range(68)]
    s = summarise_data([body], reviews, {f"f{i}": "x" for i in range(68)})
    w = s["draws"][0]["weighted"]
    assert w["estimate"] is None
    assert w["interval_95"] == pytest.approx([18 / 80, 18 / 80 + 12 / 80])
    assert "fewer than 5 reviewed" in w["warning"] and "'other'" in w["warning"]
    assert s["warnings"] == [f"draw d-00000000000a: {w['warning']}"]
    text = format_text(s)
    assert "no point estimate; between 22.5 % and 37.5 %" in text and w["warning"] in text


def test_two_sampled_strata_join_by_mover():
    # stratified draw, strata A (N 20, 5 read, 1 disagrees) and B (N 30, 6 read, 3 disagree).
    # MOVER (Zou & Donner 2008): S = sum w p, L = S - sqrt(sum (w (p - l))^2), U = S + sqrt(sum (w (u - p))^2)
    # with continuity-corrected Wilson (l, u) per stratum from scipy; weights 20/50 and 30/50.
    members = [{"case_id": f"a{i}", "seq": i + 1, "inclusion_probability": 5 / 20, "stratum": "A"} for i in range(5)]
    members += [{"case_id": f"b{i}", "seq": 50 + i, "inclusion_probability": 6 / 30, "stratum": "B"} for i in range(6)]
    body = {"draw_id": "d-00000000000b", "plan": "stratified", "population_size": 50, "options": {"size": 11},
            "members": members, "strata": {"A": {"size": 20, "drawn": 5}, "B": {"size": 30, "drawn": 6}}}
    bad = {"a0", "b0", "b1", "b2"}
    reviews = [{**_rev(m["case_id"], "r", "disagree" if m["case_id"] in bad else "agree"), "draw_id": body["draw_id"]}
               for m in members]
    w = summarise_data([body], reviews, {m["case_id"]: "x" for m in members})["draws"][0]["weighted"]
    a, b = binomtest(1, 5).proportion_ci(method="wilsoncc"), binomtest(3, 6).proportion_ci(method="wilsoncc")
    est = 0.4 * 0.2 + 0.6 * 0.5
    low = est - ((0.4 * (0.2 - a.low)) ** 2 + (0.6 * (0.5 - b.low)) ** 2) ** 0.5
    high = est + ((0.4 * (a.high - 0.2)) ** 2 + (0.6 * (b.high - 0.5)) ** 2) ** 0.5
    assert w["estimate"] == pytest.approx(est)
    assert w["interval_95"] == pytest.approx([low, high], abs=1e-12)


def test_overall_rate_kappa_and_confusion_against_references():
    labels = {"c1": "sound", "c2": "sound", "c3": "crack", "c4": "crack", "c5": "sound", "c6": "sound"}
    reviews = [
        _rev("c1", "r1", "agree"), _rev("c2", "r1", "disagree", "crack"), _rev("c3", "r1", "agree"),
        _rev("c4", "r1", "disagree", "sound"), _rev("c5", "r1", "agree"), _rev("c6", "r1", "unsure"),
        _rev("c1", "r2", "agree"), _rev("c2", "r2", "agree"), _rev("c3", "r2", "disagree", "sound"),
        _rev("c2", "r1", "agree"),  # r1 amends c2: the current verdict is the latest
    ]
    s = summarise_data([], reviews, labels)
    o = s["overall"]
    # disagreements: c3 (r2), c4 (r1) -> 2 of 6 reviewed cases
    assert (o["disagreements"], o["reviewed"]) == (2, 6)
    ci = binomtest(2, 6).proportion_ci(method="wilson")  # reference: scipy
    assert o["wilson_95"] == pytest.approx([ci.low, ci.high], abs=1e-12)
    # pairs (model, reader) for r1: c1 s/s, c2 s/s, c3 c/c, c4 c/s, c5 s/s; r2: c1 s/s, c2 s/s, c3 c/s
    model = ["sound", "sound", "crack", "crack", "sound", "sound", "sound", "crack"]
    reader = ["sound", "sound", "crack", "sound", "sound", "sound", "sound", "sound"]
    ref = cohen_kappa_score(model, reader)  # reference: scikit-learn
    assert s["agreement"]["model_vs_reader"]["kappa"] == pytest.approx(ref, abs=1e-12)
    assert s["agreement"]["confusion"]["rows"] == {"crack": {"crack": 1, "sound": 2}, "sound": {"crack": 0, "sound": 5}}
    pair = s["agreement"]["reader_pairs"][0]
    assert pair["readers"] == ["r1", "r2"] and pair["cases"] == 3
    assert pair["kappa"] == pytest.approx(cohen_kappa_score(["sound", "sound", "crack"], ["sound", "sound", "sound"]))


def test_lot_decision_in_the_ledger(ledger):
    # 40 cases, level II -> D; at AQL 4.0 the D cell is an up arrow -> C: n=5, Ac 0 Re 1
    # (MIL-STD-105E Table II-A, from memory)
    e = draw(ledger, "lot", aql=4.0, seed=2)
    lot = e.body["lot"]
    assert (lot["code_letter"], lot["plan_letter"], lot["sample_size"], lot["accept"], lot["reject"]) == ("D", "C", 5, 0, 1)
    ids = [m["case_id"] for m in e.body["members"]]
    for c in ids[:4]:
        record_review(ledger, c, reader="qa-1", verdict="agree")
    s = summarise(ledger)
    d = s["draws"][0]
    assert d["lot"]["decision"] == "pending" and d["pending"] == ids[4:]
    assert s["pending"] == ids[4:]
    record_review(ledger, ids[4], reader="qa-1", verdict="agree")
    assert summarise(ledger)["draws"][0]["lot"]["decision"] == "accept"
    record_review(ledger, ids[0], reader="qa-2", verdict="disagree")
    s = summarise(ledger)
    assert s["draws"][0]["lot"]["decision"] == "reject"
    canonical_bytes(s)  # finite numbers only: the summary is valid canonical JSON
    text = format_text(s)
    assert "reject" in text and "Ac 0 Re 1" in text and "qualified staff" in text


def test_format_text_lists_pending_and_kappa(ledger):
    e = draw(ledger, "risk", share=0.2, seed=4)
    first = e.body["members"][0]["case_id"]
    record_review(ledger, first, reader="dr-a", verdict="agree")
    text = format_text(summarise(ledger))
    assert "awaiting review" in text
    assert "population estimate: not yet" in text
    assert "Cohen's kappa, model vs reader labels" in text


def test_describe_draw_names_the_plan_and_members(ledger):
    e = draw(ledger, "lot", aql=1.0, level="I", seed=0)
    # 40 cases, level I -> C (MIL-STD-105E Table I, 26..50); at AQL 1.0 row C is a down arrow to F:
    # n=20, Ac 0 Re 1 (Table II-A, from memory)
    text = describe_draw(e.body)
    assert "code letter C" in text and "plan row F" in text and "n=20" in text
    assert sum(1 for line in text.splitlines() if line.startswith("  rv-")) == 20
