"""Verify a ledger end to end, streaming: the chain, the blobs, the query tables, the seals, a seal file.

``verify`` walks the entries in chunks and hands each entry to one check after another, each of which
says one thing: the chain walk (seq order, link, hash, body), the blob check (present and unchanged),
the derived-row comparison (the query tables agree with the entry), and the seal checks
(casefile.ledger.seal_checks). It stops at the first problem and names its seq.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Iterator
from pathlib import Path
from typing import Any, NamedTuple

from sqlalchemy import select
from sqlalchemy.engine import Connection

from casefile import schemas
from casefile.canonical import canonical_bytes, parse
from casefile.errors import ValidationError
from casefile.ledger import tables as t
from casefile.ledger.derive import derive
from casefile.ledger.report import VerifyReport
from casefile.ledger.seal_checks import SealChecker
from casefile.ledger.sealfile import SealFile
from casefile.ledger.store import READ_CHUNK, Store, entry_hash, referenced_blobs
from casefile.ledger.trust import TrustedKeys

_DERIVED = {tb.name: tb for tb in t.DERIVED_TABLES}
# seq first in every table, so a fetched row's first value is its seq
_COLUMNS = {name: ["seq", *(c.name for c in tb.columns if c.name != "seq")] for name, tb in _DERIVED.items()}


class _EntryRow(NamedTuple):
    seq: int
    kind: str
    body: str
    prev_hash: str
    hash: str


class _Parsed(NamedTuple):
    body: Any  # the parsed body, or the ValidationError that parsing raised
    refs: list[str]


def scan_blobs(store: Store, report: VerifyReport) -> set[str]:
    """Re-hash every stored blob; return the digests whose bytes or size no longer match."""
    bad: set[str] = set()
    last = ""
    with store.engine.connect() as conn:
        while True:
            rows = conn.execute(select(t.blobs).where(t.blobs.c.digest > last)
                                .order_by(t.blobs.c.digest).limit(500)).all()
            if not rows:
                return bad
            for r in rows:
                data = bytes(r.data)
                if hashlib.sha256(data).hexdigest() != r.digest or len(data) != r.size:
                    bad.add(r.digest)
                report.blobs += 1
            last = rows[-1].digest


def _chunks(store: Store, conn: Connection) -> Iterator[list[_EntryRow]]:
    pos = 1
    sql = store.sql("SELECT seq, kind, body, prev_hash, hash FROM entries WHERE seq >= ? ORDER BY seq LIMIT ?")
    while True:
        # plain driver-level tuples: this loop runs once per entry on ledgers of any size
        rows = [_EntryRow(*r) for r in conn.exec_driver_sql(
            sql, (pos, READ_CHUNK)).fetchall()]
        if not rows:
            return
        yield rows
        pos = rows[-1].seq + 1


def _parse(rows: list[_EntryRow]) -> dict[int, _Parsed]:
    out = {}
    for r in rows:
        try:
            # the hash check proves these bytes are what append wrote (strict JSON, canonical); the plain
            # C parser is enough here, and strict mode re-parses strictly
            out[r.seq] = _Parsed(json.loads(r.body), referenced_blobs(r.body))
        except ValueError as exc:
            out[r.seq] = _Parsed(ValidationError(str(exc)), [])
    return out


def _strict_problem(kind: str, body: Any, raw: bytes) -> str | None:
    try:
        if canonical_bytes(parse(raw)) != raw:
            return "body is not in canonical form (RFC 8785)"
    except ValidationError as exc:
        return f"body is not strict JSON: {exc}"
    try:
        schemas.validate(kind, body)
    except ValidationError as exc:
        return f"body no longer satisfies its schema: {exc}"
    return None


class ChainWalk:
    """Seq order, links and hashes: each entry must follow the one before it."""

    def __init__(self, strict: bool) -> None:
        self.strict = strict
        self.expected_seq, self.prev = 1, t.GENESIS_HASH

    def check(self, r: _EntryRow, body: Any) -> str | None:
        if r.seq != self.expected_seq:
            return f"missing entry: seq {self.expected_seq} is absent (the next entry present is seq {r.seq})"
        if r.prev_hash != self.prev:
            return (f"broken link: prev_hash does not match the hash of seq {r.seq - 1} "
                    "(an entry before it was changed, removed, inserted or moved)")
        raw = r.body.encode("utf-8")
        if entry_hash(r.prev_hash, r.kind, raw) != r.hash:
            return f"changed content: the {r.kind} entry's hash does not match its kind and body"
        if isinstance(body, ValidationError):
            return f"body is not valid canonical JSON: {body}"
        return _strict_problem(r.kind, body, raw) if self.strict else None

    def advance(self, r: _EntryRow) -> None:
        self.prev = r.hash
        self.expected_seq += 1


class BlobRefs:
    """Every blob an entry refers to is stored and unchanged."""

    def __init__(self, conn: Connection, bad: set[str], parsed: dict[int, _Parsed]) -> None:
        self.bad = bad
        wanted = sorted({d for p in parsed.values() for d in p.refs})
        self.present: set[str] = set()
        for i in range(0, len(wanted), 500):
            part = wanted[i:i + 500]
            self.present.update(x[0] for x in conn.execute(select(t.blobs.c.digest)
                                                            .where(t.blobs.c.digest.in_(part))))

    def check(self, refs: list[str]) -> str | None:
        for d in refs:
            if d not in self.present:
                return f"missing blob {d[:16]}… referred to by this entry"
            if d in self.bad:
                return f"changed blob {d[:16]}…: its bytes no longer hash to its digest"
        return None


class DerivedRows:
    """The query-table rows of one chunk of entries, compared with what each entry derives."""

    def __init__(self, store: Store, conn: Connection, lo: int, hi: int) -> None:
        self.actual: dict[tuple[str, int], list[tuple]] = {}
        for name, cols in _COLUMNS.items():
            sql = store.sql(f"SELECT {', '.join(cols)} FROM {name} WHERE seq >= ? AND seq <= ?")
            for r in conn.exec_driver_sql(sql, (lo, hi)).fetchall():
                self.actual.setdefault((name, r[0]), []).append(tuple(r))

    def check(self, seq: int, kind: str, body: Any, refs: list[str]) -> str | None:
        try:
            expected = derive(seq, kind, body, refs)
        except (KeyError, TypeError) as exc:
            return f"body lacks a field the query tables need: {exc}"
        want: dict[str, list[tuple]] = {}
        for name, row in expected:
            want.setdefault(name, []).append(tuple(row.get(c) for c in _COLUMNS[name]))
        for name in sorted(set(want) | {n for n in _DERIVED if (n, seq) in self.actual}):
            if sorted(want.get(name, [])) != sorted(self.actual.get((name, seq), [])):
                return (f"derived row disagrees: table {name!r} does not match the entry "
                        "(rebuild the query tables, then verify again)")
        return None


def orphan_rows(conn: Connection, head_seq: int) -> tuple[int, str] | None:
    """A query-table row beyond the last entry has no entry behind it."""
    for name, tb in _DERIVED.items():
        extra = conn.execute(select(tb.c.seq).where(tb.c.seq > head_seq).limit(1)).first()
        if extra:
            return extra[0], f"derived row in {name!r} has no entry behind it"
    return None


def _check_chunk(store: Store, conn: Connection, rows: list[_EntryRow], walk: ChainWalk, seals: SealChecker, bad_blobs: set[str],
                 report: VerifyReport) -> tuple[int, str] | None:
    """Every check, entry by entry, over one chunk (its parsed bodies are freed before the next is read)."""
    parsed = _parse(rows)
    blobs, derived = BlobRefs(conn, bad_blobs, parsed), DerivedRows(store, conn, rows[0].seq, rows[-1].seq)
    for r in rows:
        body, refs = parsed[r.seq]
        problem = (walk.check(r, body) or blobs.check(refs) or derived.check(r.seq, r.kind, body, refs)
                   or seals.add(r.seq, r.kind, body, r.prev_hash, r.hash))
        if problem:  # the expected seq is r.seq, or the missing one before it
            return walk.expected_seq, problem
        walk.advance(r)
        report.entries += 1
    return None


def verify(store: Store, seal_file: SealFile | None = None, trusted: TrustedKeys | None = None, *,
           unsigned_ok: bool = False, strict: bool = False) -> VerifyReport:
    """Check everything; stop at the first problem and name its seq.

    Always: seq order, every hash, every link, blob digests and presence, the query tables, every seal
    entry (against the entries before it, and its signer against ``trusted``), and, when given, a seal
    file (see casefile.ledger.seal_checks). The hash already proves each body is byte for byte what was
    appended (and append writes only canonical, schema-valid bodies); ``strict`` also re-checks the
    canonical form and the schema of every body, for ledgers written by other tools.
    """
    trusted = trusted if trusted is not None else TrustedKeys()
    report = VerifyReport()
    if seal_file is not None:
        problem = seal_file.problem()  # the file on its own, before the ledger is read
        if problem:
            return report.fail(None, f"{seal_file.source}: {problem}")
    outdated = store.outdated_tables()
    if outdated:
        return report.fail(None, f"the query tables were made by an older release and lack {', '.join(outdated)}; "
                                 "run `casefile rebuild --reason TEXT` to derive them again")
    bad_blobs = scan_blobs(store, report)
    walk, seals = ChainWalk(strict), SealChecker(trusted, seal_file)
    with store.engine.connect() as conn:
        for rows in _chunks(store, conn):
            failure = _check_chunk(store, conn, rows, walk, seals, bad_blobs, report)
            if failure:
                return report.fail(*failure)
        report.head_seq, report.head_hash = walk.expected_seq - 1, walk.prev
        orphan = orphan_rows(conn, report.head_seq)
        if orphan:
            return report.fail(*orphan)
    report.seals_checked = len(seals.verdicts)
    report.seal_trust = seals.counts()
    if seal_file is not None:
        failure = seals.external(report, unsigned_ok)
        if failure:
            return report.fail(*failure)
    _notes(store, trusted, report)
    report.describe(unsigned_ok)
    return report


def _notes(store: Store, trusted: TrustedKeys, report: VerifyReport) -> None:
    home = None if store.file is None else Path(store.file).resolve().parent  # None: a database server
    for f in trusted.files:
        if Path(f).resolve().parent == home:
            report.notes.append(f"the trusted key {f} lies in the ledger's own folder: whoever can change the "
                                "ledger could have replaced it; keep trusted keys where the ledger's writers "
                                "cannot reach (SECURITY.md)")
    n = report.seal_trust["untrusted"]
    if n:
        report.notes.append(f"{n} signed seal {'entry' if n == 1 else 'entries'}, but no trusted key is configured: "
                            "signatures were checked only against the keys the seals carry")
