"""Query tables are guarded in the database like the entries; only the rebuild path writes them, and says so.

Also: duplicate cases raise DuplicateCaseError, and the ledger package imports run one way.
No outside source applies: these are casefile's own rules (DESIGN.md, "Trust boundaries"). The guard
tests run on both engines (a SQLite file, and a throwaway PostgreSQL server).
"""

from __future__ import annotations

import ast
import hashlib
import json
from pathlib import Path

import pytest

from casefile.errors import DuplicateCaseError, ValidationError
from casefile.ledger import Ledger
from casefile.ledger import tables as t
from tests.ledger.bodies import amendment_body, case_body
from tests.ledger.rawdb import Raw
from tests.ledger.sealing import cli, refused_line

PACKAGE = Path(__file__).resolve().parents[2] / "casefile" / "ledger"


@pytest.fixture()
def full(store_url) -> str:
    """A ledger with at least one row in every query table."""
    db = store_url
    with Ledger(db) as led:
        c = led.append("case", case_body(1, blob=b"picture"), blobs=[b"picture"])
        led.append("failed", {"attempted_at": "2026-12-01T10:00:00Z", "file_name": "a.png", "file_sha256": None,
                              "stage": "load", "reason": "a.png: truncated"})
        led.append("amendment", amendment_body(c.seq, c.hash))
        led.append("draw", {"draw_id": "d-" + "a" * 12, "plan": "random", "filters": {}, "seed": 1,
                            "options": {"size": 1}, "population_size": 1, "drawn_at": "2026-12-01T10:00:00Z",
                            "members": [{"case_id": "c-000001", "seq": 1, "inclusion_probability": 1}]})
        led.append("review", {"case_id": "c-000001", "case_seq": 1, "reader": "r1", "verdict": "agree",
                              "reviewed_at": "2026-12-01T11:00:00Z"})
        led.append("adjudication", {"case_id": "c-000001", "case_seq": 1, "adjudicator": "r3", "label": "sound",
                                    "reason": "readers split", "readings": [5, 6],
                                    "adjudicated_at": "2026-12-01T12:00:00Z"})
        led.append("replay", {"case_id": "c-000001", "case_seq": c.seq, "case_hash": c.hash,
                              "replayed_at": "2026-12-01T13:00:00Z", "reproduces": True,
                              "input_sha256": "a" * 64, "model_digest": "b" * 64, "settings_digest": "c" * 64,
                              "tolerances": {"confidence_abs": 1e-5, "map_spearman_min": 0.999,
                                             "map_max_abs_rel": 1e-4},
                              "label": {"recorded": "sound", "replayed": "sound", "equal": True},
                              "confidence": {"recorded": 0.9, "replayed": 0.9, "abs_diff": 0.0, "within": True},
                              "maps": [], "checks": [], "differences": [], "software": {"casefile": "0.1.0"}})
        led.seal()
    return db


def _raw(db: str) -> Raw:
    return Raw(db)


@pytest.mark.parametrize("table", [tb.name for tb in t.DERIVED_TABLES])
def test_raw_update_and_delete_of_every_query_table_are_refused(full, table):
    con = _raw(full)
    rows = con.execute(f"SELECT * FROM {table}").fetchall()
    assert rows, f"the fixture must put a row in {table} for this test to mean anything"
    column = next(c.name for c in t.metadata.tables[table].columns if c.name != "seq")
    for sql in (f"UPDATE {table} SET {column} = {column}", f"UPDATE {table} SET seq = seq + 100",
                f"DELETE FROM {table}", f"DELETE FROM {table} WHERE seq = {rows[0][0]}"):
        with pytest.raises(con.Error, match=f"query table {table} is derived"):
            con.execute(sql)
    assert con.execute(f"SELECT * FROM {table}").fetchall() == rows
    # a row can be added only together with its entry (the head), never for an older one
    cols = [c.name for c in t.metadata.tables[table].columns]
    first = {**dict(zip(cols, rows[0], strict=True)), "seq": 1}  # seq 1 is not the head (seq 7)
    with pytest.raises(con.Error, match="only with its entry"):
        con.execute(f"INSERT INTO {table} ({', '.join(cols)}) VALUES ({', '.join('?' * len(cols))})",
                    tuple(first.values()))
    con.close()
    with Ledger(full) as led:
        assert led.verify().ok


def test_an_update_of_cases_status_cannot_change_what_audit_returns(full):
    con = _raw(full)
    with pytest.raises(con.Error):
        con.execute("UPDATE cases SET status = 'fail'")
    con.close()
    done = cli(full, "audit", "--status", "pass", "--json")
    assert done.returncode == 0 and json.loads(done.stdout)["case_id"] == "c-000001"


def test_every_query_table_carries_its_guards(full):
    names = _raw(full).triggers()
    for tb in t.DERIVED_TABLES:
        assert {f"{tb.name}_no_update", f"{tb.name}_no_delete", f"{tb.name}_head_only"} <= names


def test_dropped_guards_come_back_when_the_ledger_is_opened(full):
    con = _raw(full)
    con.execute("DROP TRIGGER cases_no_update" + (" ON cases" if con.postgres else ""))
    con.close()
    Ledger(full).close()
    con = _raw(full)
    with pytest.raises(con.Error, match="derived"):
        con.execute("UPDATE cases SET status = 'fail'")


def test_rebuild_command_records_that_it_ran(full):
    done = cli(full, "rebuild", "--reason", "checking the rebuild path", "--json")
    assert done.returncode == 0, done.stderr
    line = json.loads(done.stdout)
    assert line["seq"] == 9 and line["reason"] == "checking the rebuild path" and line["entries"] == 8
    assert line["rows"]["cases"] == 1 and line["rows"]["seals"] == 1 and line["rows"]["entry_blobs"] == 1
    assert line["rows"]["case_checks"] == 1 and line["rows"]["adjudications"] == 1 and line["rows"]["replays"] == 1
    with Ledger(full) as led:
        assert led.get(9).kind == "rebuild" and led.verify().ok
    line = refused_line(cli(full, "rebuild", "--reason", "  "))
    assert "reason is empty" in line, line
    assert cli(full, "rebuild").returncode == 2  # --reason is required
    with Ledger(full) as led:
        assert led.count() == 9


def test_duplicate_case_raises_duplicate_case_error(store_url):
    with Ledger(store_url) as led:
        led.append("case", case_body(1))
        again = case_body(1)
        again["case_id"] = "c-other"  # same input, model and settings: the same run
        with pytest.raises(DuplicateCaseError, match="already recorded") as info:
            led.append("case", again)
        assert isinstance(info.value, ValidationError)
        with pytest.raises(DuplicateCaseError):
            led.append("case", {**case_body(2), "case_id": "c-000001"})  # same case id
        assert led.count() == 1


def _ledger_imports(path: Path) -> tuple[set[str], bool]:
    """Modules of casefile.ledger that ``path`` imports, and whether any import sits inside a function."""
    tree = ast.parse(path.read_text())
    found: set[str] = set()
    nested = False
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module and node.module.startswith("casefile.ledger"):
            names = [node.module.split(".")[2]] if node.module.count(".") >= 2 else [a.name for a in node.names]
            found.update(names)
    for fn in ast.walk(tree):
        if isinstance(fn, ast.FunctionDef | ast.AsyncFunctionDef):
            for node in ast.walk(fn):
                if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("casefile.ledger"):
                    nested = True
    return found, nested


def test_the_ledger_package_imports_one_way():
    graph = {}
    for f in sorted(PACKAGE.glob("*.py")):
        if f.name == "__init__.py":
            continue
        imports, nested = _ledger_imports(f)
        assert not nested, f"{f.name} imports a ledger module inside a function"
        graph[f.stem] = imports - {f.stem}
    assert graph["store"] <= {"tables", "derive", "location", "engines"}  # the store is at the bottom
    assert graph["engines"] <= {"tables", "postgres", "location"}  # the engines' differences, below it
    assert graph["location"] == set() and graph["postgres"] <= {"tables"}  # below the store
    assert "facade" not in set().union(*graph.values())  # only the package imports the facade
    seen: dict[str, int] = {}

    def visit(node: str, trail: tuple[str, ...]) -> None:
        assert node not in trail, "import circle: " + " -> ".join((*trail, node))
        if seen.get(node):
            return
        for nxt in graph.get(node, ()):
            visit(nxt, (*trail, node))
        seen[node] = 1

    for module in graph:
        visit(module, ())


def test_append_path_is_unchanged_for_plain_kinds(tmp_path):
    # the guards must not get in the way of a normal batch append (several entries, rows each)
    with Ledger(str(tmp_path / "l.db")) as led:
        led.append_many([("case", case_body(i, blob=hashlib.sha256(bytes([i])).digest()),
                          [hashlib.sha256(bytes([i])).digest()]) for i in range(1, 6)])
        assert led.count() == 5 and len(led.rows("entry_blobs")) == 5 and led.verify().ok
