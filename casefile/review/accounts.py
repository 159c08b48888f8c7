"""Reader accounts: ``reader`` entries holding a memory-hard hash of each reader's password.

A password is stored as scrypt (RFC 7914; ``hashlib.scrypt``) with a salt of its own (16 random bytes),
N = 2**14, r = 8, p = 1 (the interactive-login cost RFC 7914 section 2 cites from the scrypt paper) and a
32-byte key; the parameters are stored beside the hash so a later release can raise them.

Nobody can write in another reader's name: the *first* ``reader`` entry for an id is that reader's
account and is never replaced. ``add_reader`` refuses an id that already has one, and a later entry for
the same id (appended past this module) is never read. ``casefile review --reader ID`` asks for the
password of a reader who has an account (``confirm_reader``). Every refusal comes before anything is
written.
"""

from __future__ import annotations

import hashlib
import hmac
import re
import secrets
from typing import Any

from sqlalchemy.engine import Connection

from casefile.errors import ValidationError
from casefile.ledger import Entry, Ledger, utc_now

READER_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._@-]{0,63}$")
READER_ID_RULE = "1 to 64 letters, digits, '.', '_', '@' or '-', starting with a letter or digit"
MIN_PASSWORD = 10
MAX_PASSWORD = 1024
SCRYPT = {"n": 2 ** 14, "r": 8, "p": 1}
KEY_BYTES = 32
SALT_BYTES = 16


def scrypt_hex(password: str, salt: bytes, *, n: int, r: int, p: int, length: int = KEY_BYTES) -> str:
    """scrypt of the UTF-8 password as lowercase hex (memory needed: 128 * n * r bytes, allowed here)."""
    key = hashlib.scrypt(password.encode("utf-8"), salt=salt, n=n, r=r, p=p, dklen=length,
                         maxmem=256 * n * r + 1024 * 1024)
    return key.hex()


def hash_password(password: str, salt: bytes | None = None) -> dict[str, Any]:
    """The stored form of a password: scheme, cost parameters, salt and hash (hex)."""
    salt = secrets.token_bytes(SALT_BYTES) if salt is None else salt
    return {"scheme": "scrypt", **SCRYPT, "salt": salt.hex(), "hash": scrypt_hex(password, salt, **SCRYPT)}


def password_matches(stored: dict[str, Any], password: str) -> bool:
    """True when ``password`` gives the stored hash (compared in constant time)."""
    if stored.get("scheme") != "scrypt" or not isinstance(password, str) or len(password) > MAX_PASSWORD:
        return False
    got = scrypt_hex(password, bytes.fromhex(stored["salt"]), n=int(stored["n"]), r=int(stored["r"]),
                     p=int(stored["p"]), length=len(stored["hash"]) // 2)
    return hmac.compare_digest(got, stored["hash"])


def check_reader_id(reader_id: str, what: str = "reader") -> str:
    """The reader id as given when it is well formed; else a one-line ``ValidationError``."""
    if not isinstance(reader_id, str) or not READER_ID.fullmatch(reader_id):
        raise ValidationError(f"{what} {reader_id!r}: a reader id is {READER_ID_RULE}")
    return reader_id


def reader_account(ledger: Ledger, reader_id: str) -> Entry | None:
    """The account entry of ``reader_id`` (the first ``reader`` entry for it), or None."""
    for e in ledger.entries("reader"):
        if e.body["reader"] == reader_id:
            return e
    return None


def reader_accounts(ledger: Ledger) -> dict[str, Entry]:
    """{reader id: account entry}, the first entry per id."""
    out: dict[str, Entry] = {}
    for e in ledger.entries("reader"):
        out.setdefault(e.body["reader"], e)
    return out


def confirm_reader(ledger: Ledger, reader_id: str, password: str | None, what: str) -> None:
    """Refuse (``ValidationError``) a ``password`` that is not ``reader_id``'s, when that reader has an
    account; a reader without one needs none (readings recorded before accounts existed stay valid)."""
    account = reader_account(ledger, reader_id)
    if account is None:
        return
    if password is None or not password_matches(account.body["password"], password):
        raise ValidationError(f"{what}: {reader_id} has a reader account and the password given is not "
                              "theirs; nothing was recorded")


def needs_password(ledger: Ledger, reader_id: str) -> bool:
    """True when ``reader_id`` has an account, so writing in their name needs their password."""
    return reader_account(ledger, reader_id) is not None


def add_reader(ledger: Ledger, reader_id: str, password: str, again: str) -> Entry:
    """Append a ``reader`` account; refused (nothing written) for a malformed or taken id, two passwords
    that differ, or a password shorter than ``MIN_PASSWORD`` characters."""
    check_reader_id(reader_id)
    what = f"reader {reader_id}"
    if password != again:
        raise ValidationError(f"{what}: the two passwords differ; nothing was recorded")
    if len(password) < MIN_PASSWORD:
        raise ValidationError(f"{what}: the password is shorter than {MIN_PASSWORD} characters")
    if len(password) > MAX_PASSWORD:
        raise ValidationError(f"{what}: the password is longer than {MAX_PASSWORD} characters")
    if password.strip() != password:
        raise ValidationError(f"{what}: the password starts or ends with a space")
    body = {"reader": reader_id, "password": hash_password(password), "added_at": utc_now()}

    def work(conn: Connection) -> Entry:
        # looked up under the chain-head lock, so two `reader add` runs for one id cannot both pass
        existing = reader_account(ledger, reader_id)
        if existing is not None:
            raise ValidationError(f"{what}: already has an account (seq {existing.seq}); an account is never "
                                  "replaced, so nobody can take over a reader's name")
        return ledger.append_in(conn, "reader", body)

    return ledger.transaction(work)


__all__ = ["MIN_PASSWORD", "READER_ID", "READER_ID_RULE", "SCRYPT", "add_reader", "check_reader_id", "confirm_reader",
           "hash_password", "needs_password", "password_matches", "reader_account", "reader_accounts", "scrypt_hex"]
