"""Readers' readings in a real ledger: one reading per reader, case and draw; labels the model knows;
whose readings count in a draw; adjudication only where readers disagree. Every refusal leaves the
ledger's head where it was.

Outside sources: none beyond the rules themselves. These are the recording rules of
casefile.review.readings (a reading corrected, never overwritten: 21 CFR 11.10(e), the same rule the
ledger keeps), checked on invented cases; the statistics they feed are checked against scipy,
scikit-learn and statsmodels elsewhere.
"""

import re

import pytest

from casefile.errors import ValidationError
from casefile.review.readings import record_adjudication, record_review
from casefile.review.stats import summarise
from casefile.review.store import draw


def _refused(ledger, fn, *args, words, **kwargs):
    head = ledger.head()
    with pytest.raises(ValidationError, match=words) as info:
        fn(ledger, *args, **kwargs)
    assert "\n" not in str(info.value)
    assert ledger.head() == head  # nothing was written
    return str(info.value)


def test_a_second_reading_for_the_same_draw_is_refused_unless_it_names_the_one_it_corrects(ledger):
    d = draw(ledger, "random", size=40, seed=1)
    first = record_review(ledger, "rv-00001", reader="dr-a", verdict="agree")
    assert first.body["draw_id"] == d.body["draw_id"]
    msg = _refused(ledger, record_review, "rv-00001", reader="dr-a", verdict="disagree", label="crack",
                   words="already read this case")
    assert f"--amends {first.seq}" in msg
    fixed = record_review(ledger, "rv-00001", reader="dr-a", verdict="disagree", label="crack", amends=first.seq)
    assert fixed.body["amends_seq"] == first.seq and fixed.body["draw_id"] == d.body["draw_id"]
    # the older reading can no longer be amended: the correction chain has moved on
    _refused(ledger, record_review, "rv-00001", reader="dr-a", verdict="agree", amends=first.seq,
             words=f"already corrected by seq {fixed.seq}")


def test_the_same_reader_may_read_a_case_again_for_another_draw(ledger):
    a = draw(ledger, "random", size=40, seed=1)
    one = record_review(ledger, "rv-00003", reader="dr-a", verdict="agree")
    b = draw(ledger, "random", size=40, seed=2)
    two = record_review(ledger, "rv-00003", reader="dr-a", verdict="disagree", label="sound")
    assert (one.body["draw_id"], two.body["draw_id"]) == (a.body["draw_id"], b.body["draw_id"])
    assert "amends_seq" not in two.body
    explicit = record_review(ledger, "rv-00004", reader="dr-b", verdict="agree", draw_id=a.body["draw_id"])
    assert explicit.body["draw_id"] == a.body["draw_id"]
    _refused(ledger, record_review, "rv-00004", reader="dr-b", verdict="agree", draw_id="d-ffffffffffff",
             words="no draw 'd-ffffffffffff'")


def test_a_draw_counts_only_its_own_readings(ledger):
    # 13 cases drawn twice: reads for the second draw must not change the first draw's counts
    a = draw(ledger, "random", size=13, seed=5)
    ids = [m["case_id"] for m in a.body["members"]]
    for c in ids[:3]:
        record_review(ledger, c, reader="qa-1", verdict="disagree", draw_id=a.body["draw_id"])
    b = draw(ledger, "random", size=40, seed=6)
    for c in ids:
        record_review(ledger, c, reader="qa-2", verdict="disagree", draw_id=b.body["draw_id"])
    s = summarise(ledger)
    first = next(x for x in s["draws"] if x["draw_id"] == a.body["draw_id"])
    assert (first["disagreements"], first["reviewed"]) == (3, 3)
    assert first["pending"] == ids[3:] and first["read_elsewhere"] == ids[3:]
    second = next(x for x in s["draws"] if x["draw_id"] == b.body["draw_id"])
    assert second["reviewed"] == 13


@pytest.mark.parametrize(("kwargs", "words"), [
    ({"verdict": "disagree", "label": "cracked"}, r"label 'cracked' is not one of the model's labels \(sound, crack\)"),
    ({"verdict": "disagree", "label": "crack", "new_label": True}, "--new-label given but 'crack'"),
    ({"verdict": "unsure", "new_label": True}, "--new-label given without a label"),
])
def test_reader_labels_are_checked_against_the_model_before_any_write(ledger, kwargs, words):
    head = ledger.head()
    with pytest.raises(ValidationError) as info:
        record_review(ledger, "rv-00001", reader="dr-a", **kwargs)
    message = str(info.value)
    assert re.search(words, message) and "\n" not in message, message
    assert ledger.head() == head  # nothing was written


def test_a_new_label_is_recorded_as_such(ledger):
    e = record_review(ledger, "rv-00001", reader="dr-a", verdict="disagree", label="cold shut", new_label=True)
    assert e.body["label"] == "cold shut" and e.body["label_is_new"] is True


def test_adjudication_only_where_readers_disagree(ledger):
    d = draw(ledger, "random", size=40, seed=1)
    record_review(ledger, "rv-00001", reader="dr-a", verdict="agree")
    record_review(ledger, "rv-00001", reader="dr-b", verdict="agree")
    _refused(ledger, record_adjudication, "rv-00001", adjudicator="lead", label="sound", reason="tie-break",
             words="do not disagree with each other")
    third = record_review(ledger, "rv-00001", reader="dr-c", verdict="disagree", label="crack")
    _refused(ledger, record_adjudication, "rv-00001", adjudicator="dr-c", label="sound", reason="mine",
             words="one of the readers in disagreement")
    _refused(ledger, record_adjudication, "rv-00001", adjudicator="lead", label="pore", reason="x",
             words="not one of the model's labels")
    _refused(ledger, record_adjudication, "rv-00001", adjudicator="lead", label="sound", reason=" ",
             words="reason is empty")
    e = record_adjudication(ledger, "rv-00001", adjudicator="lead", label="crack", reason="hairline at the gate",
                            draw_id=d.body["draw_id"])
    assert e.body["readings"][-1] == third.seq and len(e.body["readings"]) == 3
    assert ledger.rows("adjudications")[0]["case_id"] == "rv-00001"
    s = summarise(ledger)
    assert s["reader_conflicts"] == {"cases": ["rv-00001"], "adjudicated": ["rv-00001"], "open": [],
                                     "n_of": "cases"}
    assert ledger.verify().ok
