"""Seals: append the head hash and an RFC 6962 Merkle root over every entry hash, optionally Ed25519-signed
and naming a successor key, and export the seal file (casefile.ledger.sealfile)."""

from __future__ import annotations

import os
from typing import Any

from sqlalchemy import select
from sqlalchemy.engine import Connection

from casefile.errors import LedgerError
from casefile.ledger import tables as t
from casefile.ledger.keys import KeySource, load_private_key, load_public_key, public_hex, sign
from casefile.ledger.merkle import MerkleAccumulator
from casefile.ledger.sealfile import body_message, check_output, seal_file_bytes, write_seal_file
from casefile.ledger.store import Entry, Store, utc_now
from casefile.ledger.trust import KeyTrust, TrustedKeys


def _tree(conn: Connection) -> tuple[MerkleAccumulator, str]:
    """The Merkle tree over every entry hash so far, and the head hash."""
    acc = MerkleAccumulator()
    head_hash = t.GENESIS_HASH
    pos = 1
    while True:
        rows = conn.execute(select(t.entries.c.seq, t.entries.c.hash).where(t.entries.c.seq >= pos)
                            .order_by(t.entries.c.seq).limit(5000)).all()
        if not rows:
            return acc, head_hash
        for _, h in rows:
            acc.add(bytes.fromhex(h))
            head_hash = h
        pos = rows[-1][0] + 1


def _handover_refusal(store: Store, conn: Connection, key: str, successor: str | None) -> str | None:
    """Refuse, before writing, a seal that verify would later refuse: one signed by a key that has handed
    over to a successor, or naming a successor that cannot be one."""
    keys = KeyTrust(TrustedKeys())
    for e in store.entries(kind="seal", conn=conn):
        keys.judge(e.seq, e.body)
    return keys.refusal(key, successor)


def seal(store: Store, key_path: KeySource | None = None, note: str | None = None, *,
         successor: KeySource | None = None, output: str | os.PathLike[str] | None = None) -> Entry:
    """Append a seal over every entry so far (the chain head cannot move while it is computed).

    With ``key_path`` the seal is signed; with ``successor`` (a public key) it also hands over: the seals
    after it must be signed by the successor, and this key may sign no more. With ``output`` the seal
    file is written there, signed as a whole by the same key. Keys, the successor and the output path
    are all checked before anything is recorded.
    """
    key = load_private_key(key_path) if key_path else None
    successor_hex = load_public_key(successor) if successor is not None else None
    if successor_hex and key is None:
        raise LedgerError("a successor key is handed over only by a signed seal: give the current key too")
    out = check_output(output) if output is not None else None

    def work(conn: Connection) -> Entry:
        acc, head_hash = _tree(conn)
        if key is not None:
            refusal = _handover_refusal(store, conn, public_hex(key), successor_hex)
            if refusal:
                raise LedgerError(f"seal refused: {refusal}")
        body: dict[str, Any] = {"sealed_at": utc_now(), "tree_size": acc.size, "head_hash": head_hash,
                                "merkle_root": acc.root().hex(), "hash_algorithm": "sha-256"}
        if note:
            body["note"] = note
        if successor_hex:
            body["successor"] = successor_hex
        if key is not None:
            body["signature"] = sign(key, body_message(body))
        return store.append_in(conn, "seal", body)

    entry = store.transaction(work)
    if out is not None:
        try:
            write_seal_file(out, seal_file_bytes(entry, key))
        except LedgerError as exc:
            raise LedgerError(f"{exc}; the seal itself is recorded as seq {entry.seq}: seal again to export "
                              "a new one") from None
    return entry
