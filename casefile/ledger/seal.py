"""Seals: the head hash and an RFC 6962 Merkle root over every entry hash, optionally Ed25519-signed."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

from cryptography.exceptions import InvalidSignature
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey, Ed25519PublicKey
from sqlalchemy import select

from casefile.canonical import canonical_bytes, parse
from casefile.errors import LedgerError, ValidationError
from casefile.ledger import tables as t
from casefile.ledger.merkle import MerkleAccumulator
from casefile.ledger.store import Entry, Ledger, utc_now

SEAL_FILE_FORMAT = "casefile seal file, version 1"


def generate_key(path: str | os.PathLike[str]) -> Path:
    """Write a new Ed25519 private key (PKCS#8 PEM, mode 0600) and its public key beside it (.pub)."""
    p = Path(path)
    if p.exists():
        raise LedgerError(f"{p}: a key file already exists; refusing to overwrite it")
    key = Ed25519PrivateKey.generate()
    pem = key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
                            serialization.NoEncryption())
    fd = os.open(p, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    with os.fdopen(fd, "wb") as f:
        f.write(pem)
    pub = p.with_name(p.name + ".pub")
    pub.write_bytes(key.public_key().public_bytes(serialization.Encoding.PEM,
                                                  serialization.PublicFormat.SubjectPublicKeyInfo))
    return pub


def load_private_key(path: str | os.PathLike[str]) -> Ed25519PrivateKey:
    try:
        key = serialization.load_pem_private_key(Path(path).read_bytes(), password=None)
    except FileNotFoundError:
        raise LedgerError(f"{path}: key file not found (create one with `casefile keygen {path}`)") from None
    except (ValueError, TypeError) as exc:
        raise LedgerError(f"{path}: not a PEM private key: {exc}") from None
    if not isinstance(key, Ed25519PrivateKey):
        raise LedgerError(f"{path}: the key is not an Ed25519 key")
    return key


def load_public_key(path: str | os.PathLike[str]) -> str:
    """Hex of the raw 32-byte Ed25519 public key in a PEM file (or in a private key file)."""
    data = Path(path).read_bytes()
    try:
        if b"PRIVATE KEY" in data:
            pub = load_private_key(path).public_key()
        else:
            pub = serialization.load_pem_public_key(data)
    except (ValueError, TypeError) as exc:
        raise LedgerError(f"{path}: not a PEM public key: {exc}") from None
    if not isinstance(pub, Ed25519PublicKey):
        raise LedgerError(f"{path}: the key is not an Ed25519 key")
    return pub.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw).hex()


def _unsigned(body: dict[str, Any]) -> bytes:
    return canonical_bytes({k: v for k, v in body.items() if k != "signature"})


def signature_ok(body: dict[str, Any]) -> bool:
    sig = body.get("signature")
    if not sig:
        return False
    try:
        pub = Ed25519PublicKey.from_public_bytes(bytes.fromhex(sig["public_key"]))
        pub.verify(bytes.fromhex(sig["value"]), _unsigned(body))
        return True
    except (InvalidSignature, ValueError):
        return False


def seal(ledger: Ledger, key_path: str | os.PathLike[str] | None = None, note: str | None = None) -> Entry:
    """Append a seal over every entry so far; the chain head cannot move while it is computed."""
    key = load_private_key(key_path) if key_path else None

    def work(conn: Any) -> Entry:
        acc = MerkleAccumulator()
        head_hash = t.GENESIS_HASH
        pos = 1
        while True:
            rows = conn.execute(select(t.entries.c.seq, t.entries.c.hash).where(t.entries.c.seq >= pos)
                                .order_by(t.entries.c.seq).limit(5000)).all()
            if not rows:
                break
            for _, h in rows:
                acc.add(bytes.fromhex(h))
                head_hash = h
            pos = rows[-1][0] + 1
        body: dict[str, Any] = {"sealed_at": utc_now(), "tree_size": acc.size, "head_hash": head_hash,
                                "merkle_root": acc.root().hex(), "hash_algorithm": "sha-256"}
        if note:
            body["note"] = note
        if key is not None:
            pub = key.public_key().public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)
            body["signature"] = {"algorithm": "Ed25519", "public_key": pub.hex(),
                                 "value": key.sign(_unsigned(body)).hex()}
        return ledger._write(conn, [ledger._prepare("seal", body, None)])[0]

    return ledger._transaction(work)


def seal_file_bytes(entry: Entry) -> bytes:
    """What `casefile seal -o FILE` writes: canonical JSON naming the seal entry and its body."""
    return canonical_bytes({"format": SEAL_FILE_FORMAT, "seq": entry.seq, "hash": entry.hash,
                            "prev_hash": entry.prev_hash, "body": entry.body}) + b"\n"


def read_seal_file(path: str | os.PathLike[str]) -> dict[str, Any]:
    try:
        data = parse(Path(path).read_bytes())
    except FileNotFoundError:
        raise LedgerError(f"{path}: seal file not found") from None
    except ValidationError as exc:
        raise LedgerError(f"{path}: not a seal file: {exc}") from None
    if not isinstance(data, dict) or data.get("format") != SEAL_FILE_FORMAT or "body" not in data:
        raise LedgerError(f"{path}: not a casefile seal file")
    return data
