"""Flags on the demo: rare on the honest model, near-certain on the shortcut model, and the same in the
query tables, the audit and the second-read draw.

Outside sources: the goals are those of the issue (at most 10 % of honest cases flagged, at least 90 %
of shortcut cases), measured on the demo's own synthetic scenario (invented data, by construction the
honest model reads the defects and the shortcut model the corner marker). The `audit --check` filter
is checked against a raw SQL query over the entries' JSON (SQLite's json_each, outside our query
tables); the interval rule against the definition in casefile.review.weighted.
"""

from __future__ import annotations

import json
import sqlite3
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest

from casefile.cli import main
from casefile.demo import FLAG_GOALS, flag_line, flag_rates
from casefile.flags import case_flagged
from casefile.ledger import Ledger
from casefile.review import summarise


@dataclass
class _Out:  # the two fields of a pipeline Outcome that flag_rates reads
    input: str
    body: dict[str, Any]


def _rates(demo_dir):
    truth = json.loads((demo_dir / "scenario" / "truth.json").read_text())["files"]
    led = Ledger(str(demo_dir / "casefile.db"), create=False)
    by_model: dict[str, list[_Out]] = {}
    for e in led.entries(kind="case"):
        by_model.setdefault(e.body["model"]["name"], []).append(_Out(e.body["input"]["file_name"], e.body))
    led.close()
    return {m: flag_rates(outs, truth) for m, outs in by_model.items()}


def test_demo_meets_the_flag_goals(demo_dir):
    rates = _rates(demo_dir)
    honest, shortcut = rates["casting-honest"], rates["casting-shortcut"]
    assert honest["cases"] == shortcut["cases"] == 40
    assert honest["share_flagged"] <= FLAG_GOALS["honest"]  # at most 10 % of honest cases
    assert shortcut["share_flagged"] >= FLAG_GOALS["shortcut"]  # at least 90 % of shortcut cases
    # method agreement is a note: it never sends a case to a person, however often it warns
    assert "method_agreement" not in honest["by_check"] and "method_agreement" not in shortcut["by_check"]
    line = flag_line("honest model", honest, "at most 10 %")
    assert f"{honest['flagged']}/40 cases flagged" in line and "goal at most 10 %" in line


def test_query_tables_agree_with_the_bodies(demo_dir):
    con = sqlite3.connect(demo_dir / "casefile.db")
    for seq, body in con.execute("SELECT seq, body FROM entries WHERE kind = 'case'"):
        b = json.loads(body)
        assert b["flagged"] == bool(b["flags"]) and all(isinstance(c["flags"], bool) for c in b["checks"])
        (flagged,) = con.execute("SELECT flagged FROM cases WHERE seq = ?", (seq,)).fetchone()
        assert flagged == int(case_flagged(b))
        rows = con.execute("SELECT name, outcome, flags FROM case_checks WHERE seq = ?", (seq,)).fetchall()
        assert sorted(rows) == sorted((c["name"], c["outcome"], int(c["flags"])) for c in b["checks"])
    con.close()


RAW = ("SELECT DISTINCT e.seq FROM entries e, json_each(e.body, '$.checks') c WHERE e.kind = 'case' "
       "AND json_extract(c.value, '$.name') = ? AND json_extract(c.value, '$.outcome') = ?")


@pytest.mark.parametrize("pairs", [[("region_focus", "fail")], [("confidence", "warn")],
                                   [("region_focus", "warn"), ("confidence", "fail")], [("deletion", "not-run")]])
def test_audit_check_filter_equals_a_raw_sql_query(demo_dir, capsys, pairs):
    con = sqlite3.connect(demo_dir / "casefile.db")
    want = set.intersection(*({s for (s,) in con.execute(RAW, p)} for p in pairs))
    con.close()
    args = [a for n, o in pairs for a in ("--check", f"{n}={o}")]
    assert main(["--store", str(demo_dir / "casefile.db"), "audit", *args, "--json"]) == 0
    rows = [json.loads(x) for x in capsys.readouterr().out.splitlines()]
    assert {r["seq"] for r in rows} == want
    assert all(r["checks"][n] == o for r in rows for n, o in pairs)


def test_audit_csv_has_one_column_per_check(demo_dir, capsys):
    assert main(["--store", str(demo_dir / "casefile.db"), "audit", "--csv", "--flagged", "yes"]) == 0
    lines = capsys.readouterr().out.splitlines()
    head = lines[0].split(",")
    assert {"flagged", "flags", "check_region_focus", "check_confidence", "check_method_agreement"} <= set(head)
    assert len(lines) - 1 == sum(r["flagged"] for r in _rates(demo_dir).values())
    assert all(row.split(",")[head.index("flagged")] == "True" for row in lines[1:])


def test_demo_risk_draw_takes_every_flag_and_gives_an_open_interval(demo_dir):
    led = Ledger(str(demo_dir / "casefile.db"), create=False)
    body = next(led.entries("draw")).body
    flagged = {r["case_id"] for r in led.cases() if r["flagged"]}
    members = {m["case_id"]: m for m in body["members"]}
    assert flagged <= set(members) and all(members[c]["inclusion_probability"] == 1 for c in flagged)
    assert body["strata"]["unflagged"]["drawn"] >= min(5, body["strata"]["unflagged"]["size"])
    w = summarise(led)["draws"][0]["weighted"]
    led.close()
    low, high = w["interval_95"]
    assert high > low  # never a one-point interval


def test_a_cards_flag_policy_reaches_the_record(tmp_path, few_inputs, honest):
    # the card says confidence is only a note; the record keeps that policy and follows it
    import shutil

    from casefile.models import load_model
    from casefile.pipeline import record_case
    from demo_cases.train import ENTRY_POINT

    weights, card_path = honest
    folder = tmp_path / "model"
    folder.mkdir()
    card = json.loads(Path(card_path).read_text())
    card["flag_policy"] = {"confidence": "note", "region_focus": "flag-on-fail"}
    shutil.copy(weights, folder / card["weights"])
    (folder / "card.json").write_text(json.dumps(card))
    loaded = load_model(str(folder / card["weights"]), str(folder / "card.json"), trusted_entry_points=[ENTRY_POINT])
    path = sorted(few_inputs.iterdir())[0]
    body = record_case(str(tmp_path / "c.db"), loaded, str(path), prediction="crack",
                       key=str(tmp_path / "site.key")).body
    policy = body["settings"]["explain"]["flag_policy"]
    assert policy["confidence"] == "note" and policy["region_focus"] == "flag-on-fail"
    assert policy["numerical"] == "flag-on-fail"  # checks the card leaves out keep the default
    by_name = {c["name"]: c for c in body["checks"]}
    assert by_name["confidence"]["flags"] is False
    assert by_name["region_focus"]["flags"] == (by_name["region_focus"]["outcome"] == "fail")
