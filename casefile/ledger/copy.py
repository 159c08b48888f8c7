"""Move a whole ledger to another place, SQLite or PostgreSQL, byte for byte: `casefile copy`.

The source is verified first; the copy is written in one transaction into an empty ledger (all of it, or
nothing), then verified on its own. Bodies are canonical JSON, so every hash is the same on both sides:
the two heads must match exactly.
"""

from __future__ import annotations

from dataclasses import dataclass

from sqlalchemy.engine import Connection

from casefile.errors import LedgerError
from casefile.ledger import tables as t
from casefile.ledger.location import locate
from casefile.ledger.store import Store, referenced_blobs
from casefile.ledger.trust import TrustedKeys
from casefile.ledger.verify import verify


@dataclass(frozen=True)
class CopyReport:
    source: str
    destination: str
    entries: int
    blobs: int
    head_seq: int
    head_hash: str


def _verified(store: Store, trusted: TrustedKeys, side: str) -> tuple[int, int, str]:
    report = verify(store, None, trusted)
    if not report.ok:
        where = f"seq {report.first_bad_seq}: " if report.first_bad_seq else ""
        raise LedgerError(f"{store.path}: the {side} does not verify ({where}{report.problem})")
    return report.blobs, report.head_seq, report.head_hash


def copy_ledger(source: str, destination: str, *, site_keys: bool = True) -> CopyReport:
    """Copy every entry and blob of ``source`` into ``destination`` (a new or empty ledger).

    Refused in one line, before anything is written: the same place twice, a source that does not
    verify (seals checked against the site's trusted keys, with ``site_keys``), a destination that
    holds entries already. A destination that fails verify afterwards, or whose head differs from the
    source's, is reported the same way.
    """
    if locate(source).url == locate(destination).url:
        raise LedgerError(f"{locate(source).path}: the source and the destination are the same ledger")
    trusted = TrustedKeys.load(None, site=site_keys)
    with Store(source, create=False) as src:
        _, head_seq, head_hash = _verified(src, trusted, "source")
        with Store(destination) as dst:
            if dst.head()[0]:
                raise LedgerError(f"{dst.path}: the destination holds {dst.count()} entries already; copy only "
                                  "into a new or empty ledger")

            def work(conn: Connection) -> int:
                if conn.execute(t.entries.select().limit(1)).first() is not None:
                    raise LedgerError(f"{dst.path}: the destination received entries meanwhile; nothing copied")
                n = 0
                for e in src.entries(stop=head_seq):
                    wanted = {d for d in referenced_blobs(e.raw.decode("utf-8")) if not dst.has_blob(conn, d)}
                    dst.write_copied(conn, e, {d: src.blob(d) for d in sorted(wanted)})
                    n += 1
                return n

            n = dst.transaction(work)
            blobs, dst_seq, dst_hash = _verified(dst, trusted, "copy")
            if (dst_seq, dst_hash) != (head_seq, head_hash) or n != head_seq:
                raise LedgerError(f"{dst.path}: the copy's head (seq {dst_seq}, {dst_hash[:16]}…) differs from the "
                                  f"source's (seq {head_seq}, {head_hash[:16]}…)")
            return CopyReport(src.path, dst.path, n, blobs, head_seq, head_hash)
