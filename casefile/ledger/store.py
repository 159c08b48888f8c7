"""The store: open a ledger database, append entries with their blobs in one transaction, read them back.

This is the bottom of the ledger package: it imports no other ledger module but the tables, the
derived-row rules, the location and the engines (SQLite, PostgreSQL). Seals (seal.py) and verify (verify.py) sit above it; casefile.ledger.facade joins them
into the ``Ledger`` users open.
"""

from __future__ import annotations

import hashlib
import json
import re
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any, Self, TypeVar

from sqlalchemy import func, select
from sqlalchemy.engine import Connection
from sqlalchemy.exc import DatabaseError, IntegrityError
from sqlalchemy.sql.elements import ColumnElement

from casefile import schemas
from casefile.canonical import canonical_bytes, parse
from casefile.errors import DuplicateCaseError, LedgerError, ValidationError, one_line
from casefile.ledger import tables as t
from casefile.ledger.derive import derive, run_key
from casefile.ledger.engines import Flavour, flavour
from casefile.ledger.location import locate

READ_CHUNK = 2000
# One plain INSERT per table at the driver level (qmark style; the engine respells it for psycopg):
# appends are the hot path and skip the statement compiler; the column order comes from the tables.
_INSERT_SQL = {tb.name: (f"INSERT INTO {tb.name} ({', '.join(c.name for c in tb.columns)}) "
                         f"VALUES ({', '.join('?' for _ in tb.columns)})", [c.name for c in tb.columns])
               for tb in (t.entries, *t.DERIVED_TABLES)}
_HEAD_SQL = "SELECT seq, hash FROM entries ORDER BY seq DESC LIMIT 1"
T = TypeVar("T")
# Kinds whose bodies are computed from the ledger itself under the write lock; only their own paths
# (seal.seal, Store.rebuild_derived) append them, through append_in.
COMPUTED_KINDS = {"seal": "Ledger.seal (casefile seal)", "rebuild": "Ledger.rebuild_derived (casefile rebuild)",
                  "upgrade": "Ledger.upgrade (casefile init)"}


_DUPLICATE_CASE = ("cases.run_key", "cases.case_id", "cases_run_key_key", "cases_case_id_key")


def utc_now() -> str:
    """The current UTC time as the ledger writes it: YYYY-MM-DDTHH:MM:SSZ."""
    return datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def entry_hash(prev_hash: str, kind: str, body: bytes) -> str:
    """hash = SHA-256(prev_hash || 0x0a || kind || 0x0a || canonical body), as lowercase hex."""
    return hashlib.sha256(prev_hash.encode("ascii") + b"\n" + kind.encode("utf-8") + b"\n" + body).hexdigest()


@dataclass(frozen=True)
class Entry:
    seq: int
    kind: str
    body: dict[str, Any]
    prev_hash: str
    hash: str
    raw: bytes = field(repr=False, default=b"")


@dataclass
class CaseHistory:
    """A case as an auditor reads it: the original entry and everything appended about it since."""

    entry: Entry
    amendments: list[Entry]
    reviews: list[Entry]
    replays: list[Entry] = field(default_factory=list)

    @property
    def case_id(self) -> str:
        return self.entry.body["case_id"]

    def timeline(self) -> list[Entry]:
        return sorted([self.entry, *self.amendments, *self.reviews, *self.replays], key=lambda e: e.seq)


CASE_PREFIX_MIN = 8  # characters after "cf-" (or of an id without it) that name a case uniquely enough


class Store:
    """An append-only, hash-chained ledger in SQLite or PostgreSQL: appends, reads, and the rebuild of its
    query tables.

    Users open ``casefile.ledger.Ledger``, which is this class plus ``seal`` and ``verify``.
    """

    def __init__(self, url: str, *, create: bool = True, synchronous: str = "FULL") -> None:
        """Open (or create) the ledger at ``url``.

        ``synchronous`` is SQLite's durability setting: FULL (default) makes every committed entry
        survive a power cut; NORMAL, in WAL mode, survives a killed process but may lose the last
        commits on a power cut (never corrupting the file), and is several times faster on slow disks.
        """
        if synchronous.upper() not in ("FULL", "NORMAL"):
            raise LedgerError(f"synchronous must be FULL or NORMAL, not {synchronous!r}")
        self.synchronous = synchronous.upper()
        loc = locate(url)
        self.url, self.path = loc.url, loc.path
        # the file's folder, for a SQLite ledger (verify's note on keys kept beside it); None on a server
        self.file = loc.path if loc.engine == "sqlite" else None
        self.flavour: Flavour = flavour(loc, self.synchronous)
        self.flavour.check(create)
        self.engine = self.flavour.make_engine()
        self._insert = {name: (self.flavour.sql(sql), cols) for name, (sql, cols) in _INSERT_SQL.items()}
        try:
            with self.engine.connect().execution_options(write=True) as conn, conn.begin():
                self.schema_version = self.flavour.create(conn)
        except DatabaseError as exc:  # also "file is not a database"
            self.engine.dispose()
            raise LedgerError(f"{self.path}: cannot open ledger: {_first_line(exc)}") from None
        if self.schema_version > t.SCHEMA_VERSION:
            self.engine.dispose()
            raise LedgerError(f"{self.path}: made by a newer release (schema version {self.schema_version}; this "
                              f"release knows up to {t.SCHEMA_VERSION}); open it with that release")

    def sql(self, text: str) -> str:
        """Driver-level SQL written with ``?`` placeholders, spelt for this ledger's engine."""
        return self.flavour.sql(text)

    def _insert_row(self, conn: Connection, table: str, row: dict[str, Any]) -> None:
        sql, cols = self._insert[table]
        conn.exec_driver_sql(sql, tuple(row.get(c) for c in cols))

    def outdated_tables(self) -> list[str]:
        """Query-table columns this release derives that the database lacks (a ledger made by an older
        release, before ``rebuild``), as ``table.column``; empty when the tables are current."""
        have: dict[str, set[str]] = {}
        with self.engine.connect() as conn:
            for tb in t.DERIVED_TABLES:
                have[tb.name] = self.flavour.columns(conn, tb.name)
        return [f"{tb.name}.{c.name}" for tb in t.DERIVED_TABLES for c in tb.columns if c.name not in have[tb.name]]

    def close(self) -> None:
        self.engine.dispose()

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # ------------------------------------------------------------------ writing
    def append(self, kind: str, body: dict[str, Any], blobs: Iterable[bytes] | None = None) -> Entry:
        """Validate ``body`` against its kind's schema, then append it and its blobs in one transaction."""
        return self.append_many([(kind, body, blobs)])[0]

    def append_many(self, items: Iterable[tuple[str, dict[str, Any], Iterable[bytes] | None]]) -> list[Entry]:
        """Append several entries in one transaction: all of them are recorded, or none."""
        items = list(items)
        for kind, _, _ in items:
            if kind in COMPUTED_KINDS:
                raise ValidationError(f"{kind} entries are computed from the ledger: make them with "
                                      f"{COMPUTED_KINDS[kind]}")
        prepared = [self._prepare(kind, body, blob_iter) for kind, body, blob_iter in items]
        if not prepared:
            return []
        return self.transaction(lambda conn: self._write(conn, prepared))

    def transaction(self, work: Callable[[Connection], T], *, upgrading: bool = False) -> T:
        """Run ``work(conn)`` in one write transaction holding the chain-head lock (SQLite: BEGIN IMMEDIATE;
        PostgreSQL: an advisory transaction lock): all it appends is kept, or none."""
        if self.schema_version < t.SCHEMA_VERSION and not upgrading:
            raise LedgerError(f"{self.path}: this ledger is at schema version {self.schema_version} and this release "
                              f"writes version {t.SCHEMA_VERSION}; run `casefile init` to upgrade it (it only adds)")
        try:
            with self.engine.connect().execution_options(write=True) as conn, conn.begin():
                self.flavour.lock(conn)
                return work(conn)
        except IntegrityError as exc:
            msg = _first_line(exc)
            if any(k in msg for k in _DUPLICATE_CASE):
                raise DuplicateCaseError("case refused: this input was already recorded with the same model "
                                         "and settings") from None
            raise LedgerError(f"{self.path}: append refused: {msg}") from None
        except DatabaseError as exc:
            raise LedgerError(f"{self.path}: append failed: {_first_line(exc)}") from None

    def append_in(self, conn: Connection, kind: str, body: dict[str, Any],
                  blobs: Iterable[bytes] | None = None) -> Entry:
        """Append one entry inside a write transaction opened by ``transaction`` (for seals and rebuilds,
        whose bodies are computed from the ledger under the same lock)."""
        return self._write(conn, [self._prepare(kind, body, blobs)])[0]

    def write_copied(self, conn: Connection, entry: Entry, blobs: dict[str, bytes]) -> None:
        """Write an entry read from another ledger, byte for byte, inside a write transaction (casefile
        copy): its hash must follow from its prev_hash, kind and body, and ``blobs`` (digest → bytes)
        holds the blobs it refers to that this ledger lacks. Its query rows are derived here."""
        if entry_hash(entry.prev_hash, entry.kind, entry.raw) != entry.hash:
            raise LedgerError(f"{self.path}: copy refused at seq {entry.seq}: its hash does not follow from its "
                              "kind and body")
        self._store_blobs(conn, list(blobs.values()), list(blobs))
        self._insert_row(conn, "entries", {"seq": entry.seq, "kind": entry.kind, "body": entry.raw.decode("utf-8"),
                                           "prev_hash": entry.prev_hash, "hash": entry.hash})
        self._insert_derived(conn, derive(entry.seq, entry.kind, entry.body,
                                          referenced_blobs(entry.raw.decode("utf-8"))))

    def has_blob(self, conn: Connection, digest: str) -> bool:
        return conn.execute(select(t.blobs.c.digest).where(t.blobs.c.digest == digest)).first() is not None

    @staticmethod
    def _prepare(kind: str, body: dict[str, Any], blob_iter: Iterable[bytes] | None) -> tuple:
        schemas.validate(kind, body)
        raw = canonical_bytes(body)
        blob_list = list(blob_iter or [])
        digests = [hashlib.sha256(b).hexdigest() for b in blob_list]
        text = raw.decode("utf-8")
        clean = json.loads(text)  # our own canonical bytes: the plain C parser reads them exactly
        referenced = referenced_blobs(text)
        stray = sorted(set(digests) - set(referenced))
        if stray:
            raise ValidationError(f"{kind} body refused: blob {stray[0][:12]}… is not referred to by the body")
        return (kind, raw, clean, blob_list, digests, referenced)

    def _write(self, conn: Connection, prepared: list[tuple]) -> list[Entry]:
        """Append prepared entries inside the caller's write transaction."""
        head = conn.exec_driver_sql(_HEAD_SQL).first()
        seq, prev = (head[0], head[1]) if head else (0, t.GENESIS_HASH)
        out = []
        for kind, raw, clean, blob_list, digests, referenced in prepared:
            self._require_blobs(conn, set(referenced) - set(digests), kind)
            seq += 1
            h = entry_hash(prev, kind, raw)
            self._store_blobs(conn, blob_list, digests)
            self._insert_row(conn, "entries", {"seq": seq, "kind": kind, "body": raw.decode("utf-8"),
                                          "prev_hash": prev, "hash": h})
            self._insert_derived(conn, derive(seq, kind, clean, referenced))
            out.append(Entry(seq, kind, clean, prev, h, raw))
            prev = h
        return out

    def _store_blobs(self, conn: Connection, blob_list: list[bytes], digests: list[str]) -> None:
        for data, digest in zip(blob_list, digests, strict=True):
            conn.exec_driver_sql(self.flavour.blob_insert, (digest, len(data), data))

    @staticmethod
    def _require_blobs(conn: Connection, digests: set[str], kind: str) -> None:
        for d in sorted(digests):
            if conn.execute(select(t.blobs.c.digest).where(t.blobs.c.digest == d)).first() is None:
                raise ValidationError(f"{kind} body refused: it refers to blob {d[:12]}… which is neither "
                                      "given nor stored")

    def _insert_derived(self, conn: Connection, rows: list[tuple[str, dict[str, Any]]]) -> None:
        for name, row in rows:
            self._insert_row(conn, name, row)

    def rebuild_derived(self, reason: str) -> Entry:
        """Recompute every query table from the entries and record a ``rebuild`` entry saying so.

        This is the only path that writes the query tables outside an append. In one write transaction
        it drops their guard triggers, re-creates and refills the tables (so a ledger written by an older
        release gains any column or table added since), re-creates the triggers and appends the
        ``rebuild`` entry (reason, entries read, rows written per table): the rebuild is all done and
        recorded, or none of it is. The reason is required and is checked before anything is written.
        """
        if not isinstance(reason, str) or not reason.strip():
            raise ValidationError("rebuild refused: the reason is empty; say why the query tables are rebuilt")

        def work(conn: Connection) -> Entry:
            n, counts = self.rederive(conn)
            body = {"rebuilt_at": utc_now(), "reason": reason.strip(), "entries": n, "rows": counts}
            return self.append_in(conn, "rebuild", body)

        return self.transaction(work)

    def rederive(self, conn: Connection) -> tuple[int, dict[str, int]]:
        """Inside a write transaction (rebuild, upgrade): drop the query tables' guards, re-create and refill
        the tables from the entries (so a ledger made by an older release gains new columns), put the
        guards back; return the entries read and the rows written per table."""
        self.flavour.drop_derived_guards(conn)
        for tb in t.DERIVED_TABLES:
            tb.drop(conn, checkfirst=True)
            tb.create(conn)
        counts = {tb.name: 0 for tb in t.DERIVED_TABLES}
        n = 0
        for e in self.entries(conn=conn):
            rows = derive(e.seq, e.kind, e.body, referenced_blobs(e.raw.decode("utf-8")))
            self._insert_derived(conn, rows)
            for name, _ in rows:
                counts[name] += 1
            n += 1
        self.flavour.create_derived_guards(conn)
        return n, counts

    # ------------------------------------------------------------------ reading
    def head(self) -> tuple[int, str]:
        """(seq, hash) of the last entry; (0, genesis hash) for an empty ledger."""
        with self.engine.connect() as conn:
            row = conn.execute(select(t.entries.c.seq, t.entries.c.hash)
                               .order_by(t.entries.c.seq.desc()).limit(1)).first()
        return (row[0], row[1]) if row else (0, t.GENESIS_HASH)

    def count(self, kind: str | None = None) -> int:
        q = select(func.count()).select_from(t.entries)
        if kind:
            q = q.where(t.entries.c.kind == kind)
        with self.engine.connect() as conn:
            return int(conn.execute(q).scalar_one())

    def entries(self, kind: str | None = None, start: int = 1, *, conn: Connection | None = None,
                stop: int | None = None) -> Iterator[Entry]:
        """Stream entries in seq order, a chunk at a time (memory stays flat on any ledger size)."""
        pos = start
        while True:
            q = select(t.entries).where(t.entries.c.seq >= pos).order_by(t.entries.c.seq).limit(READ_CHUNK)
            if kind:
                q = q.where(t.entries.c.kind == kind)
            if stop is not None:
                q = q.where(t.entries.c.seq <= stop)
            if conn is None:
                with self.engine.connect() as c:
                    rows = c.execute(q).all()
            else:
                rows = conn.execute(q).all()
            if not rows:
                return
            for r in rows:
                raw = r.body.encode("utf-8")
                yield Entry(r.seq, r.kind, parse(raw), r.prev_hash, r.hash, raw)
            pos = rows[-1].seq + 1

    def get(self, seq: int) -> Entry:
        with self.engine.connect() as conn:
            r = conn.execute(select(t.entries).where(t.entries.c.seq == seq)).first()
        if r is None:
            raise LedgerError(f"{self.path}: no entry with seq {seq}")
        raw = r.body.encode("utf-8")
        return Entry(r.seq, r.kind, parse(raw), r.prev_hash, r.hash, raw)

    def blob(self, digest: str) -> bytes:
        with self.engine.connect() as conn:
            r = conn.execute(select(t.blobs.c.data).where(t.blobs.c.digest == digest)).first()
        if r is None:
            raise LedgerError(f"{self.path}: no blob {digest}")
        return bytes(r[0])

    def find_case_id(self, file_sha256: str, frame: int | None, model_digest: str,
                     settings_digest: str) -> str | None:
        """The case already recorded for this input, model and settings, if any."""
        key = run_key(file_sha256, frame, model_digest, settings_digest)
        with self.engine.connect() as conn:
            r = conn.execute(select(t.cases.c.case_id).where(t.cases.c.run_key == key)).first()
        return r[0] if r else None

    def resolve_case_id(self, text: str) -> str:
        """The full case id that ``text`` names: the id itself, or a unique prefix of at least
        CASE_PREFIX_MIN characters after ``cf-`` (e.g. ``cf-1a2b3c4d``). A prefix that is too short,
        matches no case or matches several is refused in one line (the last naming a few matches)."""
        text = text.strip()
        c = t.cases.c
        with self.engine.connect() as conn:
            if conn.execute(select(c.case_id).where(c.case_id == text)).first() is not None:
                return text
            body = text[3:] if text.startswith("cf-") else text
            if len(body) < CASE_PREFIX_MIN:
                raise LedgerError(f"{self.path}: no case {text!r}; a shortened case id needs at least "
                                  f"{CASE_PREFIX_MIN} characters after 'cf-'")
            # a range on the indexed column (a LIKE pattern would read '_' in an id as a wildcard)
            found = [r[0] for r in conn.execute(
                select(c.case_id).where(c.case_id >= text, c.case_id < text + "\U0010ffff")
                .order_by(c.case_id).limit(6))]
        if not found:
            raise LedgerError(f"{self.path}: no case {text!r} (no case id starts with it)")
        if len(found) > 1:
            more = ", …" if len(found) > 5 else ""
            raise LedgerError(f"{self.path}: {text!r} is ambiguous: it starts {'more than 5' if more else len(found)} "
                              f"case ids ({', '.join(found[:5])}{more}); give more characters")
        return found[0]

    def case(self, case_id: str) -> CaseHistory:
        """The case entry with its amendments, reviews and replays, in seq order."""
        with self.engine.connect() as conn:
            r = conn.execute(select(t.cases.c.seq).where(t.cases.c.case_id == case_id)).first()
            if r is None:
                raise LedgerError(f"{self.path}: no case {case_id!r}")
            case_seq = r[0]
            amend = [x[0] for x in conn.execute(select(t.amendments.c.seq).where(
                (t.amendments.c.case_id == case_id) | (t.amendments.c.amends_seq == case_seq))
                .order_by(t.amendments.c.seq))]
            revs = [x[0] for x in conn.execute(select(t.reviews.c.seq).where(t.reviews.c.case_id == case_id)
                                               .order_by(t.reviews.c.seq))]
            reps = [x[0] for x in conn.execute(select(t.replays.c.seq).where(t.replays.c.case_id == case_id)
                                               .order_by(t.replays.c.seq))]
        return CaseHistory(self.get(case_seq), [self.get(s) for s in amend], [self.get(s) for s in revs],
                           [self.get(s) for s in reps])

    def cases(self, model: str | None = None, label: str | None = None, status: str | None = None,
              since: str | None = None, until: str | None = None) -> list[dict[str, Any]]:
        """Rows of the cases query table, filtered; ``model`` matches a name, name@version or digest prefix."""
        c = t.cases.c
        q = select(t.cases).order_by(c.seq)
        if model:
            q = q.where(model_condition(model))
        if label:
            q = q.where(c.label == label)
        if status:
            q = q.where(c.status == status)
        if since:
            q = q.where(c.recorded_at >= since)
        if until:
            q = q.where(c.recorded_at <= until)
        with self.engine.connect() as conn:
            return [dict(r._mapping) for r in conn.execute(q)]

    def rows(self, table: str) -> list[dict[str, Any]]:
        """All rows of one query table (``reviews``, ``draws``, ``failures`` …) in seq order."""
        tb = {x.name: x for x in t.DERIVED_TABLES}.get(table)
        if tb is None:
            raise LedgerError(f"no query table {table!r}")
        with self.engine.connect() as conn:
            return [dict(r._mapping) for r in conn.execute(select(tb).order_by(tb.c.seq))]


def _first_line(exc: DatabaseError) -> str:
    """The database's own message, first line only (PostgreSQL adds CONTEXT lines after it)."""
    return one_line(exc.orig if exc.orig is not None else exc, limit=500)


def model_condition(model: str) -> ColumnElement[bool]:
    """The SQL condition on the cases table for ``model``: a name, name@version, or digest prefix
    (8+ lowercase hex digits)."""
    c = t.cases.c
    name, _, version = model.partition("@")
    cond = (c.model_name == name) if not version else ((c.model_name == name) & (c.model_version == version))
    if len(model) >= 8 and all(ch in "0123456789abcdef" for ch in model):
        cond = cond | c.model_digest.startswith(model)
    return cond


_HEX64 = re.compile(r"^[0-9a-f]{64}$")
_RAW_REF = re.compile(r'"[A-Za-z0-9_]*_blob":"([0-9a-f]{64})"|"[A-Za-z0-9_]*_blobs":\[([^\]]*)\]')


def referenced_blobs(raw: str) -> list[str]:
    """Digests (64 lowercase hex) a body names in fields ending in _blob, or in string lists under keys
    ending in _blobs, read straight from its canonical JSON text (a quote inside a string value is
    always escaped there, so text inside a value cannot look like a field)."""
    found: list[str] = []
    if "_blob" not in raw:
        return found
    for m in _RAW_REF.finditer(raw):
        if m.group(1):
            found.append(m.group(1))
        else:
            found.extend(x.strip('"') for x in m.group(2).split(",") if _HEX64.match(x.strip('"')))
    return found
