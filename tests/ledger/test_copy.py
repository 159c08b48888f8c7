"""`casefile copy`: a SQLite ledger copied to PostgreSQL and back verifies on every side with identical hashes.

Outside sources: RFC 8785 (canonical JSON: the same body is the same bytes on every engine, so the same
SHA-256), and hashlib's SHA-256 recomputed here over each copied entry independently of casefile's
verify; PostgreSQL's bytea and SQLite's BLOB both return the stored bytes unchanged (their manuals).
"""

from __future__ import annotations

import hashlib
import json

import pytest

from casefile.errors import LedgerError
from casefile.ledger import Ledger, copy_ledger
from tests.ledger.bodies import amendment_body, case_body
from tests.ledger.rawdb import Raw
from tests.ledger.sealing import cli, refused_line


def _fill(where: str) -> None:
    with Ledger(where) as led:
        for i in range(1, 7):
            blob = b"\x89PNG pretend picture" + bytes([i]) if i % 2 else None
            led.append("case", case_body(i, blob=blob), blobs=[blob] if blob else None)
        led.append("amendment", amendment_body(2, led.get(2).hash, "label corrected: caf\u00e9 \U0001f600"))
        led.seal(note="before the move")
        led.rebuild_derived("checking that computed kinds travel too")


def _chain(where: str) -> list[tuple[int, str, str, str]]:
    with Ledger(where, create=False) as led:
        return [(e.seq, e.kind, e.prev_hash, e.hash) for e in led.entries()]


def _blobs(where: str) -> dict[str, bytes]:
    con = Raw(where)
    out = {d: bytes(data) for d, data in con.execute("SELECT digest, data FROM blobs")}
    con.close()
    return out


def test_sqlite_to_postgresql_and_back_keeps_every_hash(tmp_path, pg_url):
    first, back = str(tmp_path / "first.db"), str(tmp_path / "back.db")
    _fill(first)
    there = copy_ledger(first, pg_url)
    again = copy_ledger(pg_url, back)
    chains = [_chain(w) for w in (first, pg_url, back)]
    assert chains[0] == chains[1] == chains[2] and len(chains[0]) == 9
    assert there.head_hash == again.head_hash == chains[0][-1][3] and there.entries == 9 and there.blobs == 3
    # recompute the chain by hand with hashlib over the bodies read back from PostgreSQL
    with Ledger(pg_url) as led:
        prev = "0" * 64
        for e in led.entries():
            assert e.prev_hash == prev
            prev = hashlib.sha256(prev.encode() + b"\n" + e.kind.encode() + b"\n" + e.raw).hexdigest()
            assert prev == e.hash
        assert led.verify().ok and led.rows("cases") == Ledger(first).rows("cases")
    blobs = [_blobs(w) for w in (first, pg_url, back)]
    assert blobs[0] == blobs[1] == blobs[2]
    assert all(hashlib.sha256(b).hexdigest() == d for d, b in blobs[1].items())


def test_cli_copy_and_its_refusals_write_nothing(tmp_path, pg_url):
    src, dst = str(tmp_path / "src.db"), str(tmp_path / "dst.db")
    _fill(src)
    done = cli(src, "copy", "--from", src, "--to", pg_url, "--json")
    assert done.returncode == 0, done.stderr
    line = json.loads(done.stdout)
    assert line["entries"] == 9 and line["head_hash"] == _chain(src)[-1][3] and "PASSWORD" not in line["to"]
    # a destination that holds entries already: refused, unchanged
    refused = refused_line(cli(src, "copy", "--from", src, "--to", pg_url))
    assert "holds 9 entries already" in refused
    assert len(_chain(pg_url)) == 9
    refused = refused_line(cli(src, "copy", "--from", src, "--to", src))
    assert "same ledger" in refused
    # a source that does not verify: refused before the destination is even opened
    con = Raw(src, drop_triggers=True)
    con.execute("UPDATE entries SET body = replace(body, 'part_0003', 'part_0333') WHERE seq = 3")
    con.close()
    refused = refused_line(cli(src, "copy", "--from", src, "--to", dst))
    assert "source does not verify" in refused and "seq 3" in refused
    assert not (tmp_path / "dst.db").exists()


def test_copy_into_another_programs_file_is_refused(tmp_path, pg_url):
    _fill(pg_url)
    other = tmp_path / "notes.txt"
    other.write_text("not a ledger\n")
    with pytest.raises(LedgerError, match="not a casefile ledger"):
        copy_ledger(pg_url, str(other))
    assert other.read_text() == "not a ledger\n"
