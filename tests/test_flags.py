"""Flags and notes: the default rule every reader applies, and a ledger written before flags existed.

Outside sources: none beyond the rule itself (casefile.flags), which is our own; the demo rates it
leads to are checked in tests/pipeline/test_demo_flags.py. A raw sqlite3 session stands in for a
ledger made by an older release (no `flagged` column, no check rows).
"""

from __future__ import annotations

import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest

from casefile.errors import LedgerError
from casefile.flags import DEFAULT_FLAG_POLICY, case_flagged, flagging_checks, flags, policy_problem
from casefile.ledger import Ledger
from tests.ledger.bodies import case_body

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.parametrize(("name", "outcome", "flagged"), [
    ("region_focus", "warn", True), ("region_focus", "fail", True), ("region_focus", "pass", False),
    ("confidence", "warn", False), ("confidence", "fail", True),
    ("randomisation", "warn", False), ("randomisation", "fail", True),
    ("numerical", "fail", True), ("deletion", "fail", False), ("method_agreement", "warn", False),
    ("region_focus", "not-run", False), ("a_check_nobody_classed", "fail", True),
    ("a_check_nobody_classed", "warn", False),
])
def test_default_rule(name, outcome, flagged):
    assert flags(name, outcome) is flagged


def test_a_record_speaks_for_itself_and_an_older_one_gets_the_default():
    older = {"checks": [{"name": "region_focus", "outcome": "warn"}, {"name": "deletion", "outcome": "fail"}]}
    assert case_flagged(older) and flagging_checks(older["checks"]) == ["region_focus"]
    newer = {"flagged": False, "checks": [{"name": "region_focus", "outcome": "warn", "flags": False}]}
    assert not case_flagged(newer) and flagging_checks(newer["checks"]) == []


def test_policy_problems_are_named():
    assert policy_problem(DEFAULT_FLAG_POLICY) is None
    assert "unknown check 'focus'" in policy_problem({"focus": "note"})
    assert "rule 'always'" in policy_problem({"confidence": "always"})


def _entries(path):
    con = sqlite3.connect(path)
    try:
        return con.execute("SELECT seq, hash FROM entries ORDER BY seq").fetchall()
    finally:
        con.close()


def _older(path):
    """Turn a ledger into one made before flags: no `flagged` column, no check rows, no adjudications."""
    con = sqlite3.connect(path, isolation_level=None)
    for (name,) in con.execute("SELECT name FROM sqlite_master WHERE type = 'trigger'").fetchall():
        con.execute(f"DROP TRIGGER {name}")
    con.execute("ALTER TABLE cases DROP COLUMN flagged")
    con.execute("DROP TABLE case_checks")
    con.execute("DROP TABLE adjudications")
    con.close()


def test_a_ledger_from_an_older_release_rebuilds_with_the_default_rule(tmp_path):
    db = tmp_path / "old.db"
    body = case_body(1, status="warn")
    body["checks"] = [{"name": "region_focus", "value": 0.7, "threshold": 0.8, "outcome": "warn", "meaning": "m"}]
    with Ledger(str(db)) as led:
        led.append("case", body)
        led.append("case", case_body(2))
    _older(db)
    head = _entries(db)
    with pytest.raises(LedgerError) as refused:  # anything else that opens it is refused, in one line
        Ledger(str(db))
    assert "older release" in str(refused.value) and "cases.flagged" in str(refused.value)
    assert "casefile rebuild" in str(refused.value) and "\n" not in str(refused.value)
    done = subprocess.run([sys.executable, "-m", "casefile.cli", "--store", str(db), "audit"], capture_output=True,
                          text=True, cwd=ROOT)
    assert done.returncode == 1 and "casefile rebuild" in done.stderr and "Traceback" not in done.stderr
    assert _entries(db) == head  # nothing written by the refusals
    with Ledger(str(db), allow_outdated=True) as led:
        report = led.verify()  # its query tables lack what this release derives, and verify says so
        assert not report.ok and "cases.flagged" in report.problem and "casefile rebuild" in report.problem
        led.rebuild_derived("upgrade: flags and check rows added")
        assert led.verify().ok
        assert [r["flagged"] for r in led.cases()] == [1, 0]
        assert [(r["name"], r["outcome"], r["flags"]) for r in led.rows("case_checks") if r["seq"] == 1] == [
            ("region_focus", "warn", 1)]
