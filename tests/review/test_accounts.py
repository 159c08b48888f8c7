"""Reader accounts: scrypt hashes with a salt per reader, refusals before anything is written, and no
way to replace an account.

Outside sources: RFC 7914 section 12 (scrypt test vectors; the vector below is the RFC's second one,
P="password", S="NaCl", N=1024, r=8, p=16, 64 bytes, quoted from memory and matched by OpenSSL through
hashlib); POSIX exit status conventions (common practice) for the command line.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from casefile.errors import ValidationError
from casefile.ledger import Ledger
from casefile.review.accounts import (
    MIN_PASSWORD,
    SCRYPT,
    add_reader,
    hash_password,
    password_matches,
    reader_account,
    scrypt_hex,
)

ROOT = Path(__file__).resolve().parents[2]
RFC7914_VECTOR_2 = ("fdbabe1c9d3472007856e7190d01e9fe7c6ad7cbc8237830e77376634b3731622eaf30d92e22a3886ff109279d9830d"
                    "ac727afb94a83ee6d8360cbdfa2cc0640")  # RFC 7914 section 12, from memory


def test_scrypt_matches_the_rfc_7914_vector():
    assert scrypt_hex("password", b"NaCl", n=1024, r=8, p=16, length=64) == RFC7914_VECTOR_2


def test_a_stored_password_is_salted_and_checks_only_itself(tmp_path):
    led = Ledger(str(tmp_path / "a.db"))
    a = add_reader(led, "ana", "the same long pass", "the same long pass")
    b = add_reader(led, "ben", "the same long pass", "the same long pass")
    pa, pb = a.body["password"], b.body["password"]
    assert pa["salt"] != pb["salt"] and pa["hash"] != pb["hash"]  # a salt per reader
    assert (pa["n"], pa["r"], pa["p"]) == (SCRYPT["n"], SCRYPT["r"], SCRYPT["p"]) == (2 ** 14, 8, 1)
    assert "the same long pass" not in a.raw.decode()
    assert pa["hash"] == scrypt_hex("the same long pass", bytes.fromhex(pa["salt"]), n=2 ** 14, r=8, p=1)
    assert password_matches(pa, "the same long pass")
    assert not password_matches(pa, "the same long pasS")
    assert not password_matches(pa, "")


@pytest.mark.parametrize(("reader", "first", "again", "words"), [
    ("ana", "long enough one", "long enough two", "the two passwords differ"),
    ("ana", "short", "short", f"shorter than {MIN_PASSWORD} characters"),
    ("ana", " padded password ", " padded password ", "starts or ends with a space"),
    ("../../etc/passwd", "long enough one", "long enough one", "a reader id is"),
    ("", "long enough one", "long enough one", "a reader id is"),
])
def test_refused_accounts_write_nothing(tmp_path, reader, first, again, words):
    led = Ledger(str(tmp_path / "a.db"))
    with pytest.raises(ValidationError, match=words):
        add_reader(led, reader, first, again)
    assert led.count() == 0


def test_an_account_is_never_replaced(tmp_path):
    led = Ledger(str(tmp_path / "a.db"))
    first = add_reader(led, "ana", "ana's own password", "ana's own password")
    with pytest.raises(ValidationError, match="already has an account"):
        add_reader(led, "ana", "somebody else's pass", "somebody else's pass")
    assert led.count() == 1
    # an entry appended past add_reader is never read: the first one stays the account
    led.append("reader", {"reader": "ana", "password": hash_password("somebody else's pass"),
                          "added_at": "2026-12-01T00:00:00Z"})
    assert reader_account(led, "ana").seq == first.seq
    assert not password_matches(reader_account(led, "ana").body["password"], "somebody else's pass")


def _cli(store: Path, *args: str, stdin: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "casefile.cli", "--store", str(store), *args], input=stdin,
                          capture_output=True, text=True, cwd=ROOT, env=dict(os.environ))


def test_reader_add_reads_the_password_twice_from_standard_input(tmp_path):
    store = tmp_path / "c.db"
    Ledger(str(store)).close()
    done = _cli(store, "reader", "add", "ana", stdin="ana's own password\nana's own password\n")
    assert done.returncode == 0, done.stderr
    assert "reader ana added as seq 1" in done.stdout
    again = _cli(store, "reader", "add", "ana", stdin="other password 1\nother password 1\n")
    assert again.returncode == 1 and again.stderr.count("\n") == 1
    assert "already has an account (seq 1)" in again.stderr
    differ = _cli(store, "reader", "add", "ben", stdin="ben's own password\nben's own passworx\n")
    assert differ.returncode == 1 and "the two passwords differ" in differ.stderr
    once = _cli(store, "reader", "add", "cy", stdin="only one line here\n")
    assert once.returncode == 1 and "the password twice, one per line" in once.stderr
    led = Ledger(str(store))
    assert [e.body["reader"] for e in led.entries()] == ["ana"]
    assert password_matches(led.get(1).body["password"], "ana's own password")


def test_the_review_command_asks_an_account_holder_for_their_password(ledger):
    store = Path(ledger.path)
    add_reader(ledger, "ana", "ana's own password", "ana's own password")
    head = ledger.head()
    wrong = _cli(store, "review", "rv-00001", "--reader", "ana", "--verdict", "agree", stdin="a guess at it\n")
    assert wrong.returncode == 1 and wrong.stderr.count("\n") == 1
    assert "ana has a reader account and the password given is not theirs" in wrong.stderr
    empty = _cli(store, "review", "rv-00001", "--reader", "ana", "--verdict", "agree", stdin="")
    assert empty.returncode == 1 and "not theirs" in empty.stderr
    assert ledger.head() == head
    right = _cli(store, "review", "rv-00001", "--reader", "ana", "--verdict", "agree", stdin="ana's own password\n")
    assert right.returncode == 0, right.stderr
    plain = _cli(store, "review", "rv-00002", "--reader", "zed", "--verdict", "unsure", stdin="")
    assert plain.returncode == 0, plain.stderr  # a reader without an account needs no password
    assert [(e.body["reader"], e.body["case_id"]) for e in ledger.entries("review")] == \
        [("ana", "rv-00001"), ("zed", "rv-00002")]
