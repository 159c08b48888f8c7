"""Opening a store: a file that is not a casefile ledger is refused without a byte changed; and case ids
looked up by a unique prefix.

Outside sources: the SQLite file format (sqlite.org/fileformat.html, section 1.3: every database file
begins with the 16 bytes "SQLite format 3\\0"); Python's sqlite3 module (standard library) to make another
program's database and to read the journal mode back. The prefix rule (8 characters after "cf-") is
ours; the idea of a unique-prefix lookup is common practice (git's abbreviated object names).
"""

from __future__ import annotations

import hashlib
import sqlite3

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from casefile.errors import LedgerError
from casefile.ledger import Ledger
from tests.ledger.bodies import case_body


def _digest(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_another_programs_database_is_refused_and_left_as_it_was(tmp_path):
    other = tmp_path / "inventory.db"
    with sqlite3.connect(other) as conn:
        conn.execute("CREATE TABLE parts (id INTEGER PRIMARY KEY, name TEXT)")
        conn.execute("INSERT INTO parts (name) VALUES ('bracket')")
    before = _digest(other)
    for create in (True, False):
        with pytest.raises(LedgerError) as info:
            Ledger(str(other), create=create)
        msg = str(info.value)
        assert "inventory.db" in msg and "not a casefile ledger" in msg and "parts" in msg and "\n" not in msg
    assert _digest(other) == before  # not a byte changed: no tables of ours, no journal-mode switch
    with sqlite3.connect(other) as conn:
        assert [r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")] == ["parts"]
        assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "delete"  # SQLite's default, kept
    assert not (tmp_path / "inventory.db-wal").exists()


def test_a_table_called_entries_is_not_enough(tmp_path):
    other = tmp_path / "log.db"
    with sqlite3.connect(other) as conn:
        conn.execute("CREATE TABLE entries (id INTEGER, text TEXT)")
    with pytest.raises(LedgerError, match="not a casefile ledger"):
        Ledger(str(other))


def test_a_text_file_is_refused_and_untouched(tmp_path):
    notes = tmp_path / "notes.txt"
    notes.write_text("shopping list\n")
    with pytest.raises(LedgerError, match="not an SQLite database"):
        Ledger(str(notes))
    assert notes.read_text() == "shopping list\n"


def test_open_without_create_needs_a_ledger(tmp_path):
    with pytest.raises(LedgerError, match="no ledger here"):
        Ledger(str(tmp_path / "missing.db"), create=False)
    assert not (tmp_path / "missing.db").exists()
    (tmp_path / "empty.db").write_bytes(b"")
    with pytest.raises(LedgerError, match="no ledger here"):
        Ledger(str(tmp_path / "empty.db"), create=False)
    led = Ledger(str(tmp_path / "empty.db"))  # an empty file becomes a new ledger when asked to create one
    led.append("case", case_body(1))
    led.close()
    again = Ledger(str(tmp_path / "empty.db"), create=False)
    assert again.head()[0] == 1
    again.close()


@pytest.mark.parametrize("url", ["mysql://host/db", "sqlite://", "sqlite:///:memory:",
                                 "sqlite+pysqlite:///x.db", "sqlite:///x.db?mode=ro"])
def test_only_sqlite_files_and_postgresql_are_accepted_and_the_message_says_which_forms(url):
    with pytest.raises(LedgerError, match=r"sqlite:///relative/path.db.*postgresql\+psycopg://"):
        Ledger(url)


def test_sqlite_urls_open_the_same_file(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    led = Ledger("sqlite:///rel.db")
    led.append("case", case_body(1))
    led.close()
    for form in ("rel.db", f"sqlite:///{tmp_path / 'rel.db'}", "sqlite:///rel.db"):
        other = Ledger(form, create=False)
        assert other.head()[0] == 1
        other.close()


def _with_ids(tmp_path, ids):
    led = Ledger(str(tmp_path / "ids.db"))
    for i, cid in enumerate(ids):
        body = case_body(i)
        body["case_id"] = cid
        led.append("case", body)
    return led


def test_case_ids_resolve_from_a_unique_prefix(tmp_path):
    led = _with_ids(tmp_path, ["cf-1a2b3c4d5e6f7a8b", "cf-1a2b3c4d9999aaaa", "cf-77777777aaaaaaaa",
                               "cf-a_b_c_d_00000000", "cf-aXbYcZdW00000000", "c-000001"])
    assert led.resolve_case_id("cf-1a2b3c4d5e6f7a8b") == "cf-1a2b3c4d5e6f7a8b"  # a whole id
    assert led.resolve_case_id("cf-77777777") == "cf-77777777aaaaaaaa"  # 8 characters after cf-
    assert led.resolve_case_id("cf-1a2b3c4d5") == "cf-1a2b3c4d5e6f7a8b"
    assert led.resolve_case_id("c-000001") == "c-000001"  # an id of another form, whole
    # '_' is a wildcard in SQL LIKE; here it is only a character
    assert led.resolve_case_id("cf-a_b_c_d_") == "cf-a_b_c_d_00000000"
    with pytest.raises(LedgerError) as info:
        led.resolve_case_id("cf-1a2b3c4d")
    msg = str(info.value)
    assert "ambiguous" in msg and "cf-1a2b3c4d5e6f7a8b" in msg and "cf-1a2b3c4d9999aaaa" in msg
    with pytest.raises(LedgerError, match="at least 8 characters"):
        led.resolve_case_id("cf-7777")
    with pytest.raises(LedgerError, match="no case"):
        led.resolve_case_id("cf-00000000")


@given(st.sets(st.text("0123456789abcdef", min_size=16, max_size=16), min_size=1, max_size=8),
       st.integers(min_value=8, max_value=16), st.data())
@settings(max_examples=25, deadline=None)
def test_a_prefix_resolves_exactly_when_one_id_starts_with_it(tmp_path_factory, hexes, n, data):
    ids = sorted(f"cf-{h}" for h in hexes)
    led = _with_ids(tmp_path_factory.mktemp("p"), ids)
    try:
        target = data.draw(st.sampled_from(ids))
        prefix = target[: 3 + n]
        matches = [i for i in ids if i.startswith(prefix)]
        if len(matches) == 1:
            assert led.resolve_case_id(prefix) == target
        else:
            with pytest.raises(LedgerError, match="ambiguous"):
                led.resolve_case_id(prefix)
    finally:
        led.close()
