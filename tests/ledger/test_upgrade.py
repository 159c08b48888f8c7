"""Schema versions: `casefile init` upgrades a ledger made by an older release, only adding, or says why not.

Both engines. No outside source applies to the version rule itself (casefile's own, DESIGN.md: upgrades
only ever add); the stand-in for an older release's ledger is made with the SQL each engine's manual
documents (SQLite "ALTER TABLE … DROP COLUMN", PostgreSQL "ALTER TABLE"), and the upgraded ledger is
checked with hashlib's SHA-256 through verify.
"""

from __future__ import annotations

import json

import pytest

from casefile.errors import LedgerError
from casefile.ledger import Ledger
from casefile.ledger import tables as t
from tests.ledger.bodies import amendment_body, case_body
from tests.ledger.rawdb import Raw
from tests.ledger.sealing import cli, refused_line


def _version_one(where: str, *, drop: tuple[str, ...] = ()) -> None:
    """Make ``where`` look like a ledger of schema version 1: no schema_versions table, no case_checks or
    adjudications tables, no cases.flagged column (and any further ``drop`` statements)."""
    con = Raw(where, drop_triggers=True)
    for statement in ("DROP TABLE schema_versions", "DROP TABLE case_checks", "DROP TABLE adjudications",
                      "ALTER TABLE cases DROP COLUMN flagged", *drop):
        con.execute(statement)
    con.close()


def _fill(where: str) -> None:
    with Ledger(where) as led:
        for i in range(1, 4):
            led.append("case", case_body(i, blob=bytes([i]) * 10), blobs=[bytes([i]) * 10])
        led.append("amendment", amendment_body(1, led.get(1).hash))


def test_init_upgrades_an_older_ledger_by_adding_and_records_it(store_url):
    _fill(store_url)
    _version_one(store_url)
    with pytest.raises(LedgerError, match="older release .* run `casefile init` once"):
        Ledger(store_url)  # reading it as it is would miss what this release derives: refused unless asked
    with Ledger(store_url, allow_outdated=True) as led:  # opened as it is: nothing added on the way in
        assert led.schema_version == 1
        with pytest.raises(LedgerError, match="schema version 1 .* run `casefile init`"):
            led.append("amendment", amendment_body(2, led.get(2).hash))
        assert led.count() == 4
    done = cli(store_url, "init", "--json")
    assert done.returncode == 0, done.stderr
    line = json.loads(done.stdout)
    up = line["upgrade"]
    assert line["schema_version"] == t.SCHEMA_VERSION == 2 and up["seq"] == 5
    assert up["from_version"] == 1 and up["to_version"] == 2
    assert {"table schema_versions", "table case_checks", "table adjudications", "column cases.flagged",
            "entry kind upgrade"} <= set(up["added"])
    assert up["rows"]["cases"] == 3 and up["rows"]["case_checks"] == 3  # re-derived from the entries
    with Ledger(store_url) as led:
        assert led.schema_version == 2 and led.get(5).kind == "upgrade"
        assert [r["flagged"] for r in led.cases()] == [0, 0, 0] and led.verify().ok
        assert led.append("amendment", amendment_body(2, led.get(2).hash)).seq == 6  # writes again
    con = Raw(store_url)
    assert sorted(tuple(r) for r in con.execute("SELECT version, seq FROM schema_versions")) == [(2, 5)]
    with pytest.raises(con.Error, match="append-only"):
        con.execute("DELETE FROM schema_versions")
    con.close()
    again = cli(store_url, "init")  # safe to repeat: nothing more to add, nothing recorded
    assert again.returncode == 0 and "upgraded" not in again.stdout and "schema version 2" in again.stdout
    with Ledger(store_url) as led:
        assert led.count() == 6


def test_init_says_why_a_ledger_cannot_be_upgraded_and_changes_nothing(store_url):
    _fill(store_url)
    _version_one(store_url, drop=("ALTER TABLE blobs DROP COLUMN size",))
    line = refused_line(cli(store_url, "init"))
    assert "cannot upgrade from schema version 1 to 2" in line and "blobs lacks size" in line
    assert "nothing was changed" in line
    con = Raw(store_url)
    assert con.execute("SELECT COUNT(*) FROM entries").fetchone()[0] == 4
    with pytest.raises(con.Error):  # the upgrade's transaction was rolled back: still no version table
        con.execute("SELECT * FROM schema_versions")
    con.close()


def test_a_ledger_from_a_newer_release_is_refused(store_url):
    _fill(store_url)
    con = Raw(store_url)
    con.execute("INSERT INTO schema_versions (version, seq) VALUES (?, ?)", (t.SCHEMA_VERSION + 1, 4))
    con.close()
    line = refused_line(cli(store_url, "init"))
    assert f"newer release (schema version {t.SCHEMA_VERSION + 1}" in line
    with pytest.raises(LedgerError, match="newer release"):
        Ledger(store_url, create=False)
