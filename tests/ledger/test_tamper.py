"""Tampering through raw SQL, as an attacker with file access would; verify must name the first bad seq.

Every test runs on both engines: a SQLite file, and a database on a throwaway PostgreSQL server.

Outside sources: none beyond SHA-256 (hashlib) and the sqlite3 and psycopg modules an attacker would use;
the hash-chain and seal rules are casefile's own (DESIGN.md, "The ledger").
"""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from casefile.canonical import canonical_bytes
from casefile.ledger import Ledger, seal_file_bytes
from casefile.ledger import tables as t
from casefile.ledger.derive import derive
from casefile.ledger.store import entry_hash, referenced_blobs
from tests.ledger.bodies import amendment_body, case_body
from tests.ledger.rawdb import Raw

BLOB = b"\x89PNG pretend picture bytes" * 10


@pytest.fixture()
def db(store_url: str) -> str:
    path = store_url
    led = Ledger(path)
    for i in range(1, 11):
        blob = BLOB + bytes([i]) if i in (4, 7) else None
        led.append("case", case_body(i, blob=blob), blobs=[blob] if blob else None)
    led.close()
    return path


def raw(path: str, *, drop_triggers: bool = True) -> Raw:
    return Raw(path, drop_triggers=drop_triggers)


def report(path: str, seal: str | None = None):
    led = Ledger(str(path), create=False)
    try:
        return led.verify(seal)
    finally:
        led.close()


def test_intact_ledger_verifies(db):
    r = report(db)
    assert r.ok and r.entries == 10 and r.blobs == 2 and r.first_bad_seq is None


@pytest.mark.parametrize(("sql", "params"), [
    ("UPDATE entries SET body = body || ' ' WHERE seq = 3", ()),
    ("DELETE FROM entries WHERE seq = 10", ()),
    ("UPDATE blobs SET data = ?", (b"\x00",)),
    ("DELETE FROM blobs", ()),
    (f"INSERT INTO entries (seq, kind, body, prev_hash, hash) VALUES (99, 'seal', '{{}}', '{'0' * 64}', '{'1' * 64}')",
     ()),
])
def test_database_refuses_changes_while_triggers_stand(db, sql, params):
    con = raw(db, drop_triggers=False)
    with pytest.raises(con.Error, match="append-only"):
        con.execute(sql, params)
    con.close()
    assert report(db).ok


def test_one_changed_byte_of_a_body(db):
    con = raw(db)
    body = con.execute("SELECT body FROM entries WHERE seq = 5").fetchone()[0]
    con.execute("UPDATE entries SET body = ? WHERE seq = 5", (body.replace("part_0005", "part_0006"),))
    con.close()
    r = report(db)
    assert not r.ok and r.first_bad_seq == 5 and "changed content" in r.problem


def test_one_changed_byte_of_a_blob(db):
    con = raw(db)
    data = bytearray(con.execute("SELECT data FROM blobs ORDER BY digest LIMIT 1").fetchone()[0])
    digest = con.execute("SELECT digest FROM blobs ORDER BY digest LIMIT 1").fetchone()[0]
    data[3] ^= 0x01
    con.execute("UPDATE blobs SET data = ? WHERE digest = ?", (bytes(data), digest))
    owner = con.execute("SELECT seq FROM entry_blobs WHERE digest = ?", (digest,)).fetchone()[0]
    con.close()
    r = report(db)
    assert not r.ok and r.first_bad_seq == owner and "changed blob" in r.problem


def test_missing_blob(db):
    con = raw(db)
    con.execute("DELETE FROM blobs")
    con.close()
    r = report(db)
    assert not r.ok and r.first_bad_seq == 4 and "missing blob" in r.problem


def test_changed_prev_hash(db):
    con = raw(db)
    con.execute("UPDATE entries SET prev_hash = ? WHERE seq = 6", ("f" * 64,))
    con.close()
    r = report(db)
    assert not r.ok and r.first_bad_seq == 6 and "broken link" in r.problem


def test_deleted_entry(db):
    con = raw(db)
    con.execute("DELETE FROM entries WHERE seq = 5")
    con.close()
    r = report(db)
    assert not r.ok and r.first_bad_seq == 5 and "missing entry" in r.problem


def test_derived_row_that_disagrees(db):
    con = raw(db)
    con.execute("UPDATE cases SET label = 'crack' WHERE seq = 3")
    con.close()
    r = report(db)
    assert not r.ok and r.first_bad_seq == 3 and "derived row" in r.problem


def _rewrite(path: str, rows: list[tuple[str, bytes]], *, rechain: bool) -> None:
    """Replace the whole history with ``rows`` (kind, body), keeping or recomputing hashes as asked.

    The attacker also rewrites the derived tables, so only the hash chain (or a seal) can tell.
    """
    con = raw(path)
    old = {r[0]: r for r in con.execute("SELECT seq, kind, body, prev_hash, hash FROM entries")}
    for tb in t.DERIVED_TABLES:
        con.execute(f"DELETE FROM {tb.name}")
    con.execute("DELETE FROM entries")
    prev = t.GENESIS_HASH
    for seq, (kind, body, old_seq) in enumerate(rows, start=1):
        if rechain or old_seq is None:
            h = entry_hash(prev, kind, body)
            p = prev
        else:
            p, h = old[old_seq][3], old[old_seq][4]
        con.execute("INSERT INTO entries (seq, kind, body, prev_hash, hash) VALUES (?, ?, ?, ?, ?)",
                    (seq, kind, body.decode(), p, h))
        parsed = json.loads(body)
        for name, row in derive(seq, kind, parsed, referenced_blobs(body.decode())):
            cols = ", ".join(row)
            con.execute(f"INSERT INTO {name} ({cols}) VALUES ({', '.join('?' * len(row))})", tuple(row.values()))
        prev = h
    con.close()


def _history(path: str) -> list[tuple[str, bytes, int]]:
    con = raw(path, drop_triggers=False)
    rows = [(k, b.encode(), s) for s, k, b in con.execute("SELECT seq, kind, body FROM entries ORDER BY seq")]
    con.close()
    return rows


def test_entry_inserted_in_the_middle(db):
    hist = _history(db)
    forged = ("amendment", canonical_bytes(amendment_body(2, "a" * 64, "forged")), None)
    _rewrite(db, hist[:4] + [forged] + hist[4:], rechain=False)
    r = report(db)
    # the forged entry 5 links correctly to 4, but the entry after it still points at the old 4
    assert not r.ok and r.first_bad_seq == 6 and "broken link" in r.problem


def test_two_entries_swapped(db):
    hist = _history(db)
    hist[2], hist[3] = hist[3], hist[2]
    _rewrite(db, hist, rechain=False)
    r = report(db)
    assert not r.ok and r.first_bad_seq == 3 and "broken link" in r.problem


def test_tail_truncated_after_a_seal_is_caught_only_with_the_seal_file(db, tmp_path):
    led = Ledger(db)
    seal_entry = led.seal()
    seal_path = tmp_path / "seal.json"
    seal_path.write_bytes(seal_file_bytes(seal_entry))
    led.close()
    hist = _history(db)
    _rewrite(db, hist[:8], rechain=False)  # drop entries 9, 10 and the seal (11)
    assert report(db).ok  # a consistent prefix: the chain alone cannot tell
    r = report(db, str(seal_path))
    assert not r.ok and r.first_bad_seq == 9 and "truncated" in r.problem


def test_whole_chain_rewritten_is_caught_by_the_seal_file(db, tmp_path):
    led = Ledger(db)
    seal_path = tmp_path / "seal.json"
    seal_path.write_bytes(seal_file_bytes(led.seal()))
    led.close()
    hist = _history(db)
    k, body, s = hist[2]
    hist[2] = (k, body.replace(b"part_0003", b"part_0333"), s)
    # the internal seal entry (seq 11) no longer matches: the forger drops it and re-hashes the rest
    _rewrite(db, hist[:10], rechain=True)
    assert report(db).ok  # a perfect forgery of the chain alone
    r = report(db, str(seal_path))
    assert not r.ok and "rewritten" in r.problem


def test_cli_exit_codes(db):
    cmd = [sys.executable, "-m", "casefile.cli", "--store", db, "verify"]
    assert subprocess.run(cmd, capture_output=True).returncode == 0
    con = raw(db)
    con.execute("UPDATE entries SET kind = 'seal' WHERE seq = 2")
    con.close()
    done = subprocess.run(cmd, capture_output=True, text=True)
    assert done.returncode == 1 and "seq 2" in done.stdout
