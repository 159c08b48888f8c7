"""summarise / format_text: rates, weighted estimates, kappa, lot decisions and pending reviews.

Outside sources: Horvitz & Thompson (1952) estimate and its Poisson-sampling variance, worked by hand
in the comments; the Wilson interval and Cohen's kappa are checked against libraries in test_agreement.py.
"""

import pytest
from scipy.stats import binomtest
from sklearn.metrics import cohen_kappa_score

from casefile.canonical import canonical_bytes
from casefile.review.stats import describe_draw, format_text, summarise, summarise_data
from casefile.review.store import draw, record_review


def _rev(case_id, reader, verdict, label=None):
    r = {"case_id": case_id, "reader": reader, "verdict": verdict}
    if label:
        r["label"] = label
    return r


def test_risk_draw_weighted_estimate_by_hand():
    # N = 10; two flagged members (pi = 1), two others (pi = 0.25). Outcomes: flagged 1, 0; others 1, 0.
    # Horvitz-Thompson (1952): (1/N) sum y/pi = (1/10)(1/1 + 1/0.25) = 0.5;
    # Poisson variance (1/N^2) sum (1-pi)/pi^2 y^2 = (1/100)(0.75/0.0625) = 0.12.
    body = {"draw_id": "d-000000000001", "plan": "risk", "population_size": 10, "members": [
        {"case_id": "a", "seq": 1, "inclusion_probability": 1.0},
        {"case_id": "b", "seq": 2, "inclusion_probability": 1.0},
        {"case_id": "c", "seq": 3, "inclusion_probability": 0.25},
        {"case_id": "d", "seq": 4, "inclusion_probability": 0.25}]}
    reviews = [_rev("a", "r1", "disagree", "y"), _rev("b", "r1", "agree"), _rev("c", "r1", "disagree"),
               _rev("d", "r1", "agree")]
    s = summarise_data([body], reviews, {c: "x" for c in "abcd"})
    w = s["draws"][0]["weighted"]
    assert w["estimate"] == pytest.approx(0.5)
    assert w["variance"] == pytest.approx(0.12)
    assert s["draws"][0]["rate"] == 0.5
    # with a member unread the weighted estimate waits
    s = summarise_data([body], reviews[:3], {c: "x" for c in "abcd"})
    assert s["draws"][0]["weighted"]["estimate"] is None
    assert s["draws"][0]["pending"] == ["d"]


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
    assert "weighted estimate: not yet" in text
    assert "Cohen's kappa, model vs reader labels" in text


def test_describe_draw_names_the_plan_and_members(ledger):
    e = draw(ledger, "lot", aql=1.0, level="I", seed=0)
    # 40 cases, level I -> C (MIL-STD-105E Table I, 26..50); at AQL 1.0 row C is a down arrow to F:
    # n=20, Ac 0 Re 1 (Table II-A, from memory)
    text = describe_draw(e.body)
    assert "code letter C" in text and "plan row F" in text and "n=20" in text
    assert sum(1 for line in text.splitlines() if line.startswith("  rv-")) == 20
