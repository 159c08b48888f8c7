"""Audit, history and amend on invented cases: which checks warned or failed, flags, labels the model
knows, and refusals that leave the ledger's head where it was.

Outside sources: none beyond the rules themselves (invented cases; the CSV is read back with Python's
csv module, RFC 4180). The same filters are checked against raw SQL on the demo ledger in
tests/pipeline/test_demo_flags.py.
"""

from __future__ import annotations

import csv
import io
import json

import pytest

from casefile.audit import amend_case, audit_rows, format_history, format_table, history, write_csv
from casefile.cli import main
from casefile.errors import ValidationError
from casefile.ledger import Ledger
from tests.ledger.bodies import case_body


def _checks(**outcomes):
    return [{"name": n, "value": None, "threshold": None, "outcome": o, "meaning": n} for n, o in outcomes.items()]


@pytest.fixture()
def led(tmp_path):
    ledger = Ledger(str(tmp_path / "a.db"))
    # 1: an older record (no flags): region focus warned, which flags by the default rule
    a = case_body(1, status="warn")
    a["checks"] = _checks(confidence="pass", method_agreement="warn", region_focus="warn")
    # 2: a record of this release: method agreement warned, a note
    b = case_body(2, status="warn")
    b["checks"] = [{**c, "flags": False} for c in _checks(confidence="pass", method_agreement="warn",
                                                           region_focus="pass")]
    b.update(flagged=False, flags=[])
    # 3: a record whose card made region focus a note: it says so itself
    c = case_body(3, status="fail")
    c["checks"] = [{**x, "flags": False} for x in _checks(region_focus="fail")]
    c.update(flagged=False, flags=[])
    for body in (a, b, c):
        ledger.append("case", body)
    yield ledger
    ledger.close()


def test_rows_say_which_checks_warned_and_which_flagged(led):
    rows = audit_rows(led)
    assert [r["flagged"] for r in rows] == [True, False, False]
    assert rows[0]["flags"] == ["region_focus"] and rows[0]["checks"]["method_agreement"] == "warn"
    text = format_table(rows)
    assert "flag region_focus warn; note method_agreement warn" in text
    assert "note method_agreement warn" in text.splitlines()[2]
    assert "3 case(s), 1 flagged" in text
    assert [r["seq"] for r in audit_rows(led, checks=[("method_agreement", "warn")])] == [1, 2]
    assert [r["seq"] for r in audit_rows(led, checks=[("method_agreement", "warn"), ("region_focus", "warn")])] == [1]
    assert [r["seq"] for r in audit_rows(led, flagged=False)] == [2, 3]


def test_csv_columns_per_check(led):
    out = io.StringIO()
    write_csv(audit_rows(led), out)
    rows = list(csv.DictReader(io.StringIO(out.getvalue())))
    assert rows[0]["check_region_focus"] == "warn" and rows[0]["flags"] == "region_focus"
    assert rows[2]["check_region_focus"] == "fail" and rows[2]["check_confidence"] == ""
    assert rows[1]["flagged"] == "False"


def test_history_names_the_checks(led):
    text = format_history(history(led, "c-000001"))
    assert "checks warn: flag region_focus warn; note method_agreement warn" in text


def test_amend_label_must_be_known_or_marked_new(led):
    head = led.head()
    with pytest.raises(ValidationError, match=r"label 'crak' is not one of the model's labels \(sound, crack\)"):
        amend_case(led, "c-000001", author="qa", reason="typo?", changes={"label": "crak"})
    assert led.head() == head
    e = amend_case(led, "c-000001", author="qa", reason="found at review", changes={"label": "cold shut"},
                   new_label=True)
    assert e.body["label_is_new"] is True and e.body["changes"] == {"label": "cold shut"}
    assert "(a label the model does not know)" in format_history(history(led, "c-000001"))


def _cli(led, capsys, *args):
    code = main(["--store", led.path, *args])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_cli_refusals_are_one_line_and_write_nothing(led, capsys):
    head = led.head()
    for args, words in [
        (("amend", "c-000001", "--author", "qa", "--reason", "x", "--label", "crak"), "not one of the model's labels"),
        (("review", "c-000001", "--reader", "r1", "--verdict", "disagree", "--label", "crak"), "--new-label"),
        (("adjudicate", "c-000001", "--by", "lead", "--label", "sound", "--reason", "x"), "do not disagree"),
    ]:
        code, _, err = _cli(led, capsys, *args)
        assert code == 1 and words in err and err.count("\n") == 1, err
        assert led.head() == head
    assert _cli(led, capsys, "review", "c-000001", "--reader", "r1", "--verdict", "agree")[0] == 0
    code, _, err = _cli(led, capsys, "review", "c-000001", "--reader", "r1", "--verdict", "unsure")
    seq = led.head()[0]
    assert code == 1 and f"pass --amends {seq}" in err and err.count("\n") == 1
    assert led.head()[0] == seq
    code, out, _ = _cli(led, capsys, "review", "c-000001", "--reader", "r1", "--verdict", "unsure",
                        "--amends", str(seq), "--json")
    assert code == 0 and json.loads(out)["amends_seq"] == seq


@pytest.mark.parametrize(("bad", "words"), [
    ("region_focus", "argument --check: 'region_focus': give NAME=OUTCOME"),
    ("focus=fail", "argument --check: 'focus=fail': unknown check 'focus'"),
    ("region_focus=bad", "argument --check: 'region_focus=bad': outcome 'bad' is not one of"),
    ("region_focus: x", "argument --check: 'region_focus: x': give NAME=OUTCOME"),  # ': ' inside the text
])
def test_cli_check_option_is_a_usage_error_when_malformed(led, capsys, bad, words):
    with pytest.raises(SystemExit) as info:
        main(["--store", led.path, "audit", "--check", bad])
    assert info.value.code == 2
    assert words in capsys.readouterr().err.splitlines()[-1]


def test_a_filtered_listing_carries_the_same_checks_as_the_whole_one(tmp_path):
    """audit reads only the checks of the stretch of seqs it lists; each row must still carry its own."""
    ledger = Ledger(str(tmp_path / "b.db"))
    outcomes = ("pass", "warn", "fail")
    for i in range(1, 13):
        body = case_body(i, when=f"2026-11-{i:02d}T12:00:00Z")
        body["checks"] = _checks(confidence=outcomes[i % 3], region_focus=outcomes[(i // 3) % 3])
        ledger.append("case", body)
    whole = {r["seq"]: r for r in audit_rows(ledger)}
    part = audit_rows(ledger, since="2026-11-04T00:00:00Z", until="2026-11-09T00:00:00Z")
    assert [r["seq"] for r in part] == [4, 5, 6, 7, 8]
    assert all(r["checks"] == whole[r["seq"]]["checks"] and r["flags"] == whole[r["seq"]]["flags"] for r in part)
    assert whole[5]["checks"] == {"confidence": "fail", "region_focus": "warn"}  # i=5: 5 % 3 = 2, 5 // 3 = 1
    assert audit_rows(ledger, since="2026-12-01T00:00:00Z") == []
