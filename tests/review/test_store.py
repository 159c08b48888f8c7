"""Draw and review entries in a real ledger: redraw, refusals, amendments, tamper evidence.

Outside sources: ISO 2859-1 / MIL-STD-105E Tables I and II-A (code letters and sample sizes);
the draw and review rules are casefile's own.
"""

import sqlite3

import pytest

from casefile.canonical import canonical_bytes
from casefile.errors import ValidationError
from casefile.review.readings import record_review
from casefile.review.store import draw, redraw
from tests.review.conftest import case_body


@pytest.mark.parametrize(("plan", "kwargs"), [
    ("random", {"size": 8}),
    ("stratified", {"size": 9, "allocation": "equal"}),
    ("risk", {"share": 0.2}),
    ("lot", {"aql": 2.5, "level": "II"}),
])
def test_draw_is_recorded_and_redraws(ledger, plan, kwargs):
    e = draw(ledger, plan, seed=5, **kwargs)
    assert e.kind == "draw" and e.body["plan"] == plan
    assert e.body["draw_id"].startswith("d-") and len(e.body["draw_id"]) == 14
    # later cases do not change what the draw was: redraw uses only cases with seq < the draw's seq
    ledger.append("case", case_body(900, "sound", "warn"))
    assert redraw(ledger, ledger.get(e.seq)) == {"matches": True, "draw_id": e.body["draw_id"], "differences": []}
    assert ledger.verify().ok


def test_lot_draw_records_the_iso_plan(ledger):
    # 40 cases, level II -> code letter D (26..50), AQL 2.5 -> n=8, Ac 0, Re 1 (MIL-STD-105E Tables I, II-A)
    e = draw(ledger, "lot", aql=2.5, seed=1)
    lot = e.body["lot"]
    assert (lot["lot_size"], lot["code_letter"], lot["sample_size"], lot["accept"], lot["reject"]) == (40, "D", 8, 0, 1)
    assert len(e.body["members"]) == 8


def test_filters_choose_the_population(ledger):
    e = draw(ledger, "random", size=100, filters={"label": "crack"})
    assert e.body["population_size"] == 14  # i % 3 == 0 for i in 0..39
    assert {m["case_id"] for m in e.body["members"]} == {f"rv-{i:05d}" for i in range(0, 40, 3)}


def test_same_draw_twice_writes_once(ledger):
    a = draw(ledger, "random", size=5, seed=9)
    n = ledger.count()
    b = draw(ledger, "random", size=5, seed=9)
    assert b.seq == a.seq and ledger.count() == n
    c = draw(ledger, "random", size=5, seed=10)
    assert c.seq != a.seq


def _drop_triggers(path):
    con = sqlite3.connect(path)
    for (name,) in con.execute("SELECT name FROM sqlite_master WHERE type='trigger'").fetchall():
        con.execute(f"DROP TRIGGER {name}")
    return con


def test_tampered_draw_fails_verify(ledger, tmp_path):
    e = draw(ledger, "random", size=6, seed=3)
    assert ledger.verify().ok
    body = dict(e.body)
    body["members"] = body["members"][1:]  # quietly drop one member from the recorded draw
    con = _drop_triggers(str(tmp_path / "review.db"))
    con.execute("UPDATE entries SET body = ? WHERE seq = ?", (canonical_bytes(body).decode(), e.seq))
    con.commit()
    con.close()
    report = ledger.verify()
    assert not report.ok
    assert report.first_bad_seq == e.seq
    assert not redraw(ledger, ledger.get(e.seq))["matches"]


@pytest.mark.parametrize(("case_id", "kwargs", "words"), [
    ("rv-99999", {"reader": "dr-a", "verdict": "agree"}, "no case"),
    ("rv-00001", {"reader": "dr-a", "verdict": "maybe"}, "verdict 'maybe'"),
    ("rv-00001", {"reader": "", "verdict": "agree"}, "reader id is empty"),
    ("rv-00001", {"reader": "   ", "verdict": "agree"}, "reader id is empty"),
    ("rv-00001", {"reader": "dr-a", "verdict": "agree", "label": "crack"}, "use disagree"),
    ("rv-00001", {"reader": "dr-a", "verdict": "disagree", "label": "sound"}, "model's own"),
])
def test_bad_reviews_are_refused_and_nothing_written(ledger, case_id, kwargs, words):
    n = ledger.count()
    with pytest.raises(ValidationError, match=words) as info:
        record_review(ledger, case_id, **kwargs)
    assert "\n" not in str(info.value)
    assert case_id in str(info.value)
    assert ledger.count() == n


def test_amendment_keeps_both_and_only_own(ledger):
    first = record_review(ledger, "rv-00001", reader="dr-a", verdict="agree")
    second = record_review(ledger, "rv-00001", reader="dr-a", verdict="disagree", label="crack", note="hairline",
                           amends=first.seq)
    assert second.body["amends_seq"] == first.seq
    other = record_review(ledger, "rv-00001", reader="dr-b", verdict="unsure")
    assert "amends_seq" not in other.body
    n = ledger.count()
    with pytest.raises(ValidationError, match="only amend their own"):
        record_review(ledger, "rv-00001", reader="dr-b", verdict="agree", amends=first.seq)
    assert ledger.count() == n
    history = ledger.case("rv-00001")
    assert [r.seq for r in history.reviews] == [first.seq, second.seq, other.seq]


def test_review_links_to_latest_draw(ledger):
    e = draw(ledger, "random", size=40, seed=1)
    r = record_review(ledger, "rv-00002", reader="dr-a", verdict="agree")
    assert r.body["draw_id"] == e.body["draw_id"]
    assert r.body["case_seq"] == ledger.case("rv-00002").entry.seq
