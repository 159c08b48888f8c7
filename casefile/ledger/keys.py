"""Ed25519 keys for seals (RFC 8032): key files made and read with one-line refusals, signing, checking.

A key file is a trust-boundary input: whatever it holds (not PEM, another key type, an encrypted key,
nothing, binary, a folder) is refused with one line naming the file, never a traceback.
"""

from __future__ import annotations

import os
import re
import stat
from collections.abc import Mapping
from pathlib import Path

from cryptography.exceptions import InvalidSignature, UnsupportedAlgorithm
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey, Ed25519PublicKey

from casefile.errors import LedgerError
from casefile.ledger.inputs import read_small_file

KeySource = str | os.PathLike[str]  # a PEM file (public or private key), or 64 hex digits of a raw public key
ALGORITHM = "Ed25519"
MAX_KEY_FILE_BYTES = 16 * 1024  # a PEM Ed25519 key is about 120 bytes; anything this large is not one
_HEX64 = re.compile(r"^[0-9a-f]{64}$")


def short(key_hex: str) -> str:
    """The first 16 hex digits of a public key, as messages name it."""
    return key_hex[:16] + "…"


def public_hex(key: Ed25519PrivateKey | Ed25519PublicKey) -> str:
    pub = key.public_key() if isinstance(key, Ed25519PrivateKey) else key
    return pub.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw).hex()


def generate_key(path: KeySource) -> Path:
    """Write a new Ed25519 private key (PKCS#8 PEM, mode 0600) and its public key beside it (FILE.pub);
    return the public key's path. Refuses to overwrite either file."""
    p = Path(path)
    pub = p.with_name(p.name + ".pub")
    for f in (p, pub):
        if f.exists():
            raise LedgerError(f"{f}: a key file already exists; refusing to overwrite it")
    if not p.parent.is_dir():
        raise LedgerError(f"{p}: folder {p.parent} does not exist")
    key = Ed25519PrivateKey.generate()
    pem = key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
                            serialization.NoEncryption())
    try:
        fd = os.open(p, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
        with os.fdopen(fd, "wb") as f:
            f.write(pem)
        pub.write_bytes(key.public_key().public_bytes(serialization.Encoding.PEM,
                                                      serialization.PublicFormat.SubjectPublicKeyInfo))
    except OSError as exc:
        raise LedgerError(f"{p}: cannot write the key file ({exc.strerror or exc})") from None
    return pub


def _kind(key: object) -> str:
    """'an RSA key', 'an EllipticCurve key' …, from the cryptography class name."""
    name = type(key).__name__.lstrip("_").removesuffix("PrivateKey").removesuffix("PublicKey") or "other"
    return f"{'an' if name[0] in 'AEIORU' else 'a'} {name} key"


def _read_key_file(path: KeySource, what: str) -> bytes:
    hint = f" (create one with `casefile keygen {path}`)" if what == "private key" else ""
    data = read_small_file(path, f"{what} file", MAX_KEY_FILE_BYTES, hint=hint)
    p = Path(path)
    if not data.strip():
        raise LedgerError(f"{p}: the {what} file is empty")
    if b"-----BEGIN " not in data:
        raise LedgerError(f"{p}: not a PEM {what} file (no -----BEGIN line)")
    return data


def load_private_key(path: KeySource) -> Ed25519PrivateKey:
    """Read an Ed25519 private key from a PEM file that only its owner may read (like ssh's rule)."""
    data = _read_key_file(path, "private key")
    mode = Path(path).stat().st_mode
    if os.name == "posix" and mode & (stat.S_IRWXG | stat.S_IRWXO):
        raise LedgerError(f"{path}: private key file is open to other users (mode {stat.S_IMODE(mode):04o}); "
                          f"run `chmod 600 {path}`")
    try:
        key = serialization.load_pem_private_key(data, password=None)
    except TypeError:
        raise LedgerError(f"{path}: the private key is encrypted; casefile reads unencrypted PKCS#8 keys "
                          "(keep the file offline and mode 0600 instead)") from None
    except (ValueError, UnsupportedAlgorithm):
        raise LedgerError(f"{path}: not a PEM private key casefile can read") from None
    if not isinstance(key, Ed25519PrivateKey):
        raise LedgerError(f"{path}: not an Ed25519 key (it holds {_kind(key)})")
    return key


def load_public_key(source: KeySource) -> str:
    """Hex of the raw 32-byte Ed25519 public key: ``source`` is 64 hex digits, a PEM public key file, or a
    PEM private key file (its public half)."""
    text = os.fspath(source)
    if isinstance(text, str) and _HEX64.match(text):
        return text
    data = _read_key_file(source, "public key")
    if b"PRIVATE KEY" in data:
        return public_hex(load_private_key(source))
    try:
        pub = serialization.load_pem_public_key(data)
    except (ValueError, UnsupportedAlgorithm):
        raise LedgerError(f"{source}: not a PEM public key casefile can read") from None
    if not isinstance(pub, Ed25519PublicKey):
        raise LedgerError(f"{source}: not an Ed25519 key (it holds {_kind(pub)})")
    return public_hex(pub)


def sign(key: Ed25519PrivateKey, message: bytes) -> dict[str, str]:
    """A signature record: {algorithm, public_key (hex), value (hex)}."""
    return {"algorithm": ALGORITHM, "public_key": public_hex(key), "value": key.sign(message).hex()}


def signature_valid(signature: Mapping[str, str], message: bytes) -> bool:
    """True when ``signature`` (a record made by ``sign``) is a valid Ed25519 signature of ``message``
    by the key it names. Says nothing about whether that key is trusted."""
    try:
        if signature.get("algorithm") != ALGORITHM:
            return False
        pub = Ed25519PublicKey.from_public_bytes(bytes.fromhex(signature["public_key"]))
        pub.verify(bytes.fromhex(signature["value"]), message)
        return True
    except (InvalidSignature, ValueError, KeyError, TypeError):
        return False
