"""Verify a ledger end to end: hashes, links, seq order, blobs, derived tables, seals (streaming)."""

from __future__ import annotations

import hashlib
import json
from dataclasses import asdict, dataclass, field
from typing import Any, NamedTuple

from sqlalchemy import select

from casefile import schemas
from casefile.canonical import canonical_bytes, parse
from casefile.errors import ValidationError
from casefile.ledger import tables as t
from casefile.ledger.derive import derive
from casefile.ledger.merkle import MerkleAccumulator
from casefile.ledger.seal import signature_ok
from casefile.ledger.store import READ_CHUNK, Ledger, entry_hash, referenced_blobs


@dataclass
class VerifyReport:
    ok: bool = True
    first_bad_seq: int | None = None
    problem: str | None = None
    entries: int = 0
    blobs: int = 0
    head_seq: int = 0
    head_hash: str = t.GENESIS_HASH
    seals_checked: int = 0
    external_seal: dict[str, Any] | None = None
    notes: list[str] = field(default_factory=list)

    def fail(self, seq: int | None, problem: str) -> VerifyReport:
        self.ok, self.first_bad_seq, self.problem = False, seq, problem
        return self

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)

    def summary(self) -> str:
        if self.ok:
            sealed = ""
            if self.external_seal:
                sealed = f"; matches the seal over {self.external_seal['tree_size']} entries"
            return (f"intact: {self.entries} entries, {self.blobs} blobs, head seq {self.head_seq} "
                    f"hash {self.head_hash[:16]}…{sealed}")
        where = f"seq {self.first_bad_seq}" if self.first_bad_seq is not None else "ledger"
        return f"NOT intact: first bad {where}: {self.problem}"


def _bad_blobs(ledger: Ledger, report: VerifyReport) -> set[str]:
    bad: set[str] = set()
    last = ""
    with ledger.engine.connect() as conn:
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


class _EntryRow(NamedTuple):
    seq: int
    kind: str
    body: str
    prev_hash: str
    hash: str


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


def verify(ledger: Ledger, seal_file: dict[str, Any] | None = None,
           trusted_public_key: str | None = None, *, strict: bool = False) -> VerifyReport:
    """Check everything; stop at the first problem and name its seq.

    Always: seq order, every hash, every link, blob digests and presence, the query tables, internal
    seals and (when given) an exported seal. The hash already proves each body is byte for byte what
    was appended (and append writes only canonical, schema-valid bodies); ``strict`` also re-checks the
    canonical form and the schema of every body, for ledgers written by other tools.
    """
    report = VerifyReport()
    bad_blobs = _bad_blobs(ledger, report)
    derived_tables = {tb.name: tb for tb in t.DERIVED_TABLES}
    # seq first in every table, so a fetched row's first value is its seq
    columns = {name: ["seq", *(c.name for c in tb.columns if c.name != "seq")] for name, tb in derived_tables.items()}
    acc = MerkleAccumulator()
    sealed_size = seal_file["body"]["tree_size"] if seal_file else None
    sealed_root = sealed_hash = None
    expected_seq, prev = 1, t.GENESIS_HASH
    seen_seal_entry = False

    with ledger.engine.connect() as conn:
        pos = 1
        while True:
            # plain driver-level tuples: this loop runs once per entry on ledgers of any size
            rows = [_EntryRow(*r) for r in conn.exec_driver_sql(
                "SELECT seq, kind, body, prev_hash, hash FROM entries WHERE seq >= ? ORDER BY seq LIMIT ?",
                (pos, READ_CHUNK)).fetchall()]
            if not rows:
                break
            lo, hi = rows[0].seq, rows[-1].seq
            actual: dict[tuple[str, int], list[tuple]] = {}
            for name, cols in columns.items():
                sql = f"SELECT {', '.join(cols)} FROM {name} WHERE seq >= ? AND seq <= ?"
                for r in conn.exec_driver_sql(sql, (lo, hi)).fetchall():
                    actual.setdefault((name, r[0]), []).append(tuple(r))
            refs: dict[int, list[str]] = {}
            parsed: dict[int, Any] = {}
            for r in rows:
                try:
                    # the hash check below proves these bytes are what append wrote (strict JSON,
                    # canonical); the plain C parser is enough here, --strict re-parses strictly
                    parsed[r.seq] = json.loads(r.body)
                    refs[r.seq] = referenced_blobs(r.body)
                except ValueError as exc:
                    parsed[r.seq] = ValidationError(str(exc))
                    refs[r.seq] = []
            wanted = sorted({d for ds in refs.values() for d in ds})
            present: set[str] = set()
            for i in range(0, len(wanted), 500):
                part = wanted[i:i + 500]
                present.update(x[0] for x in conn.execute(select(t.blobs.c.digest).where(t.blobs.c.digest.in_(part))))

            for r in rows:
                seq = r.seq
                if seq != expected_seq:
                    return report.fail(expected_seq, f"missing entry: seq {expected_seq} is absent "
                                                     f"(the next entry present is seq {seq})")
                raw = r.body.encode("utf-8")
                if r.prev_hash != prev:
                    return report.fail(seq, f"broken link: prev_hash does not match the hash of seq {seq - 1} "
                                            "(an entry before it was changed, removed, inserted or moved)")
                if entry_hash(r.prev_hash, r.kind, raw) != r.hash:
                    return report.fail(seq, f"changed content: the {r.kind} entry's hash does not match its "
                                            "kind and body")
                body = parsed[seq]
                if isinstance(body, ValidationError):
                    return report.fail(seq, f"body is not valid canonical JSON: {body}")
                if strict:
                    problem = _strict_problem(r.kind, body, raw)
                    if problem:
                        return report.fail(seq, problem)
                for d in refs[seq]:
                    if d not in present:
                        return report.fail(seq, f"missing blob {d[:16]}… referred to by this entry")
                    if d in bad_blobs:
                        return report.fail(seq, f"changed blob {d[:16]}…: its bytes no longer hash to its digest")
                try:
                    expected_rows = derive(seq, r.kind, body, refs[seq])
                except (KeyError, TypeError) as exc:
                    return report.fail(seq, f"body lacks a field the query tables need: {exc}")
                want: dict[tuple[str, int], list[tuple]] = {}
                for name, row in expected_rows:
                    want.setdefault((name, seq), []).append(tuple(row.get(c) for c in columns[name]))
                names = {k[0] for k in want} | {n for n in derived_tables if (n, seq) in actual}
                for name in sorted(names):
                    key = (name, seq)
                    if sorted(want.get(key, [])) != sorted(actual.get(key, [])):
                        return report.fail(seq, f"derived row disagrees: table {name!r} does not match "
                                                "the entry (rebuild the query tables, then verify again)")
                if r.kind == "seal":
                    problem = _check_seal_entry(body, acc, prev)
                    if problem:
                        return report.fail(seq, problem)
                    report.seals_checked += 1
                if seal_file and seq == seal_file.get("seq"):
                    seen_seal_entry = True
                    if r.hash != seal_file.get("hash"):
                        return report.fail(seq, "the seal entry in the ledger differs from the exported seal")
                acc.add(bytes.fromhex(r.hash))
                if sealed_size is not None and acc.size == sealed_size:
                    sealed_root, sealed_hash = acc.root().hex(), r.hash
                prev = r.hash
                expected_seq += 1
                report.entries += 1
            pos = hi + 1

        report.head_seq, report.head_hash = expected_seq - 1, prev
        for name, tb in derived_tables.items():
            extra = conn.execute(select(tb.c.seq).where(tb.c.seq > report.head_seq).limit(1)).first()
            if extra:
                return report.fail(extra[0], f"derived row in {name!r} has no entry behind it")

    if seal_file:
        problem = _check_external_seal(seal_file, report, sealed_root, sealed_hash, seen_seal_entry,
                                       trusted_public_key)
        if problem:
            return report.fail(*problem)
    return report


def _check_seal_entry(body: dict[str, Any], acc: MerkleAccumulator, prev: str) -> str | None:
    if body["tree_size"] != acc.size:
        return f"seal covers {body['tree_size']} entries but {acc.size} come before it"
    if body["head_hash"] != (prev if acc.size else t.GENESIS_HASH):
        return "seal's head hash does not match the entry before it"
    if body["merkle_root"] != acc.root().hex():
        return "seal's Merkle root does not match the entries before it"
    if "signature" in body and not signature_ok(body):
        return "seal's Ed25519 signature does not verify"
    return None


def _check_external_seal(seal_file: dict[str, Any], report: VerifyReport, root: str | None,
                         head_hash: str | None, seen: bool, trusted: str | None) -> tuple[int | None, str] | None:
    body = seal_file["body"]
    size = body["tree_size"]
    report.external_seal = {"tree_size": size, "merkle_root": body["merkle_root"], "signed": "signature" in body}
    if "signature" in body:
        if not signature_ok(body):
            return None, "the seal file's signature does not verify (the seal file was altered)"
        if trusted and body["signature"]["public_key"] != trusted:
            return None, "the seal was signed by a different key than the trusted public key"
    elif trusted:
        return None, "a trusted public key was given but the seal is not signed"
    if report.entries < size:
        return report.entries + 1, (f"entries missing: the ledger ends at seq {report.entries} but the seal "
                                    f"covers {size} entries (the tail was truncated)")
    if head_hash != body["head_hash"] or root != body["merkle_root"]:
        return size, (f"history differs from the sealed one: entries 1..{size} no longer hash to the sealed "
                      "Merkle root (the chain was rewritten)")
    if seal_file.get("seq") is not None and not seen:
        return seal_file["seq"], "the seal entry itself is missing from the ledger"
    if not trusted and "signature" in body:
        report.notes.append("signature checked against the key inside the seal; pass --public-key to "
                            "check it against a key you trust")
    return None
