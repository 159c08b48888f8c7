"""Seal files: what `casefile seal -o FILE` writes and `casefile verify --seal FILE` reads.

Format version 2 is the seal entry as the ledger holds it (seq, prev_hash, hash, body) plus, when the
seal is signed, ``file_signature``: Ed25519 over the RFC 8785 canonical JSON of every other field, made
with the same key that signed the body. Every field verify relies on is therefore under one signature.
A file is also checked on its own before any ledger is read: hash = entry_hash(prev_hash, "seal",
canonical body), seq = tree_size + 1 and prev_hash = head_hash (a seal covers every entry before it).

Format version 1 (older casefile) kept seq, hash and prev_hash outside any signature, so anyone could
change them without breaking one. A version 1 file is read, but only ever counts as an unsigned seal.

A seal file arrives from outside: anything that is not a well-formed seal file (not JSON, wrong types,
missing or null fields, unknown fields, too large) is refused with one line naming the file.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Literal

from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

from casefile import schemas
from casefile.canonical import canonical_bytes, parse
from casefile.errors import LedgerError, OutputError, ValidationError
from casefile.files import write_atomic
from casefile.ledger.inputs import read_small_file
from casefile.ledger.keys import KeySource, load_private_key, public_hex, sign, signature_valid
from casefile.ledger.store import Entry, entry_hash

FORMAT_V1 = "casefile seal file, version 1"
FORMAT_V2 = "casefile seal file, version 2"
MAX_SEAL_FILE_BYTES = 1024 * 1024  # a seal file is under 2 KB; a larger one is refused unread
_MESSAGE_LIMIT = 160


def body_message(body: dict[str, Any]) -> bytes:
    """What a seal body's own signature covers: the canonical JSON of the body without ``signature``."""
    return canonical_bytes({k: v for k, v in body.items() if k != "signature"})


def file_message(doc: dict[str, Any]) -> bytes:
    """What a version 2 file signature covers: the canonical JSON of every field but ``file_signature``
    (its ``format`` field keeps it apart from a body signature, whose bodies have no such field)."""
    return canonical_bytes({k: v for k, v in doc.items() if k != "file_signature"})


@dataclass(frozen=True)
class SealFile:
    """A seal file as read: its seal entry, and the file signature when there is one (version 2)."""

    version: Literal[1, 2]
    seq: int
    prev_hash: str
    hash: str
    body: dict[str, Any]
    file_signature: dict[str, str] | None
    source: str  # where it was read from, for messages

    @property
    def tree_size(self) -> int:
        return int(self.body["tree_size"])

    @property
    def key(self) -> str | None:
        """The public key (hex) the whole file is signed with; None for an unsigned or version 1 file."""
        return self.file_signature["public_key"] if self.file_signature else None

    def document(self) -> dict[str, Any]:
        doc: dict[str, Any] = {"format": FORMAT_V1 if self.version == 1 else FORMAT_V2, "seq": self.seq,
                               "prev_hash": self.prev_hash, "hash": self.hash, "body": self.body}
        if self.file_signature:
            doc["file_signature"] = self.file_signature
        return doc

    def problem(self) -> str | None:
        """What is wrong with the file on its own (no ledger needed), or None."""
        if entry_hash(self.prev_hash, "seal", canonical_bytes(self.body)) != self.hash:
            return "the seal file was altered: its hash does not match its body and prev_hash"
        if self.seq != self.tree_size + 1 or self.prev_hash != self.body["head_hash"]:
            return ("the seal file was altered: a seal is the entry right after those it covers, but it says "
                    f"seq {self.seq} over {self.tree_size} entries")
        if "signature" in self.body and not signature_valid(self.body["signature"], body_message(self.body)):
            return "the seal file was altered: the seal's own signature does not verify"
        if self.file_signature and not signature_valid(self.file_signature, file_message(self.document())):
            return "the seal file was altered: its file signature does not verify"
        return None


def _clip(text: str) -> str:
    text = " ".join(text.split())
    return text if len(text) <= _MESSAGE_LIMIT else text[:_MESSAGE_LIMIT - 1] + "…"


def parse_seal_file(data: bytes, source: str) -> SealFile:
    """Read and fully check the bytes of a seal file; one-line LedgerError naming ``source`` on any fault."""
    def refuse(why: str) -> LedgerError:
        return LedgerError(f"{source}: not a valid seal file: {_clip(why)}")

    try:
        doc = parse(data)
    except ValidationError as exc:
        raise refuse(str(exc)) from None
    try:
        schemas.validate("seal_file", doc)
        schemas.validate("seal", doc["body"])
    except ValidationError as exc:
        raise refuse(str(exc).replace("seal_file body refused: ", "").replace("seal body refused: ", "body: ")) from None
    body, sig = doc["body"], doc.get("file_signature")
    version: Literal[1, 2] = 1 if doc["format"] == FORMAT_V1 else 2
    if version == 2 and ("signature" in body) != (sig is not None):
        raise refuse("a version 2 file is signed as a whole exactly when its seal is signed (one of the two "
                     "signatures is missing)")
    if sig is not None and sig["public_key"] != body["signature"]["public_key"]:
        raise refuse("the file signature and the seal's own signature name different keys")
    return SealFile(version, doc["seq"], doc["prev_hash"], doc["hash"], body, sig, source)


def read_seal_file(path: str | os.PathLike[str]) -> SealFile:
    """Read a seal file from disk (see ``parse_seal_file``)."""
    data = read_small_file(path, "seal file", MAX_SEAL_FILE_BYTES)
    return parse_seal_file(data, str(path))


def seal_file_bytes(entry: Entry, key: Ed25519PrivateKey | KeySource | None = None) -> bytes:
    """The version 2 seal file for a seal entry: signed as a whole with ``key`` (the key that signed the
    seal, required for a signed seal), or unsigned for an unsigned seal."""
    if entry.kind != "seal":
        raise LedgerError(f"seq {entry.seq} is a {entry.kind} entry, not a seal")
    signer = entry.body.get("signature", {}).get("public_key")
    if key is not None and not isinstance(key, Ed25519PrivateKey):
        key = load_private_key(key)
    if signer and key is None:
        raise LedgerError(f"seal seq {entry.seq} is signed: its file must be signed with the same key")
    if key is not None and public_hex(key) != signer:
        raise LedgerError(f"seal seq {entry.seq}: the key given is not the key that signed the seal")
    doc: dict[str, Any] = {"format": FORMAT_V2, "seq": entry.seq, "prev_hash": entry.prev_hash,
                           "hash": entry.hash, "body": entry.body}
    if key is not None:
        doc["file_signature"] = sign(key, file_message(doc))
    return canonical_bytes(doc) + b"\n"


def check_output(path: str | os.PathLike[str]) -> Path:
    """Refuse an output path that cannot take a seal file, before anything is recorded."""
    p = Path(path)
    if p.is_dir():
        raise LedgerError(f"{p}: is a folder; name the seal file to write")
    if not p.parent.is_dir():
        raise LedgerError(f"{p}: folder {p.parent} does not exist")
    if not os.access(p.parent, os.W_OK) or (p.exists() and not os.access(p, os.W_OK)):
        raise LedgerError(f"{p}: cannot write here")
    return p


def write_seal_file(path: str | os.PathLike[str], data: bytes) -> Path:
    """Write a seal file whole, then rename it into place (a reader never sees half a file)."""
    p = check_output(path)
    try:
        return write_atomic(p, data, mode=0o644)  # a seal file is public: auditors keep copies of it
    except OutputError as exc:
        raise LedgerError(f"seal file {exc}") from None
