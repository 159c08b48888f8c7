"""Seal files: signed as a whole (format version 2), checked on their own, and refused in one line when malformed.

Outside sources: RFC 8032 section 7.1 (Ed25519 test vector 1, checked through the `cryptography`
package); RFC 8785 (canonical JSON, the bytes a file signature covers).
"""

from __future__ import annotations

import copy
import json
import sqlite3

import pytest
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from casefile.canonical import canonical_bytes
from casefile.errors import LedgerError
from casefile.ledger import Ledger, read_seal_file
from casefile.ledger import tables as t
from casefile.ledger.keys import signature_valid
from casefile.ledger.sealfile import FORMAT_V1, FORMAT_V2, file_message
from tests.ledger.sealing import cli, make_sealed, refused_line

# RFC 8032 section 7.1, TEST 1: secret key, public key, empty message, signature.
RFC8032_SECRET = "9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60"
RFC8032_PUBLIC = "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a"
RFC8032_SIGNATURE = ("e5564300c360ac729086e2cc806e828a84877f1eb8e5d974d873e06522490155"
                     "5fb8821590a33bacc61e39701cf9b46bd25bf5f0595bbe24655141438e7a100b")


def test_rfc8032_test_vector_1():
    key = Ed25519PrivateKey.from_private_bytes(bytes.fromhex(RFC8032_SECRET))
    assert key.sign(b"").hex() == RFC8032_SIGNATURE  # Ed25519 signatures are deterministic (RFC 8032 5.1.6)
    record = {"algorithm": "Ed25519", "public_key": RFC8032_PUBLIC, "value": RFC8032_SIGNATURE}
    assert signature_valid(record, b"")
    assert not signature_valid(record, b"\x00")
    assert not signature_valid({**record, "algorithm": "Ed448"}, b"")


@pytest.fixture()
def sealed(tmp_path):
    return make_sealed(tmp_path)


def _doc(path):
    return json.loads(path.read_text())


def _write(path, doc):
    path.write_bytes(canonical_bytes(doc) + b"\n")


def test_version_2_file_is_signed_as_a_whole(sealed):
    doc = _doc(sealed.seal)
    assert doc["format"] == FORMAT_V2 and set(doc) == {"format", "seq", "prev_hash", "hash", "body", "file_signature"}
    assert signature_valid(doc["file_signature"], file_message(doc))
    assert doc["file_signature"]["public_key"] == doc["body"]["signature"]["public_key"]
    assert read_seal_file(sealed.seal).problem() is None


@pytest.mark.parametrize("field, value", [("seq", 4), ("seq", 6), ("hash", "e" * 64), ("prev_hash", "e" * 64)])
def test_seq_or_hash_changed_fails(sealed, field, value):
    doc = _doc(sealed.seal)
    assert doc[field] != value
    doc[field] = value
    _write(sealed.seal, doc)
    with Ledger(str(sealed.db)) as led:
        r = led.verify(str(sealed.seal), public_key=str(sealed.pub))
    assert not r.ok and r.failure == "integrity" and "altered" in r.problem
    one_line = cli(sealed.db, "verify", "--seal", str(sealed.seal), "--public-key", str(sealed.pub))
    assert one_line.returncode == 1 and "altered" in one_line.stdout


@pytest.mark.parametrize("field", ["seq", "hash", "prev_hash"])
def test_seq_or_hash_nulled_or_removed_is_refused_in_one_line(sealed, field):
    doc = _doc(sealed.seal)
    doc[field] = None
    _write(sealed.seal, doc)
    with Ledger(str(sealed.db)) as led, pytest.raises(LedgerError, match="not a valid seal file"):
        led.verify(str(sealed.seal), public_key=str(sealed.pub))
    line = refused_line(cli(sealed.db, "verify", "--seal", str(sealed.seal), "--public-key", str(sealed.pub)))
    assert "seal.json" in line and field in line, line
    del doc[field]
    _write(sealed.seal, doc)
    line = refused_line(cli(sealed.db, "verify", "--seal", str(sealed.seal)))
    assert "seal.json" in line and field in line, line


def _drop_last_entry(db):
    con = sqlite3.connect(db, isolation_level=None)
    for name in t.TRIGGER_NAMES:
        con.execute(f"DROP TRIGGER IF EXISTS {name}")
    last = con.execute("SELECT MAX(seq) FROM entries").fetchone()[0]
    for tb in t.DERIVED_TABLES:
        con.execute(f"DELETE FROM {tb.name} WHERE seq = ?", (last,))
    con.execute("DELETE FROM entries WHERE seq = ?", (last,))
    con.close()


def test_deleting_the_seal_entry_is_caught(sealed):
    _drop_last_entry(sealed.db)  # the issue's probe: remove the seal entry itself
    with Ledger(str(sealed.db)) as led:
        assert led.verify().ok  # a consistent prefix: the chain alone cannot tell
        r = led.verify(str(sealed.seal), public_key=str(sealed.pub))
    assert not r.ok and r.first_bad_seq == 5 and "seal entry itself is missing" in r.problem


def _as_version_1(sealed):
    doc = _doc(sealed.seal)
    del doc["file_signature"]
    doc["format"] = FORMAT_V1
    return doc


def test_version_1_file_counts_as_unsigned(sealed):
    _write(sealed.seal, _as_version_1(sealed))
    with Ledger(str(sealed.db)) as led:
        r = led.verify(str(sealed.seal), public_key=str(sealed.pub))
        assert not r.ok and r.failure == "trust" and "version 1" in r.problem
        r = led.verify(str(sealed.seal), public_key=str(sealed.pub), unsigned_ok=True)
    assert r.ok and r.external_seal.trust == "unsigned" and r.external_seal.format_version == 1
    assert any(p.startswith("who made the seal: it is unsigned") for p in r.does_not_prove)


def test_version_1_attack_from_the_issue_is_refused(sealed):
    # drop the seal entry and null the unsigned fields of an old-style file: it used to pass
    _drop_last_entry(sealed.db)
    doc = _as_version_1(sealed)
    doc["seq"] = doc["hash"] = None
    _write(sealed.seal, doc)
    line = refused_line(cli(sealed.db, "verify", "--seal", str(sealed.seal), "--public-key", str(sealed.pub), "--unsigned-ok"))
    assert "not a valid seal file" in line, line


def test_unsigned_seal_needs_unsigned_ok(tmp_path):
    db = tmp_path / "l.db"
    with Ledger(str(db)) as led:
        from tests.ledger.bodies import case_body

        led.append("case", case_body(1))
        led.seal(output=tmp_path / "s.json")
        assert "file_signature" not in _doc(tmp_path / "s.json")
        r = led.verify(str(tmp_path / "s.json"))
        assert not r.ok and r.failure == "trust" and "unsigned" in r.problem
        r = led.verify(str(tmp_path / "s.json"), unsigned_ok=True)
    assert r.ok and r.proves[-1].startswith("the ledger matches this seal file")
    assert r.does_not_prove[0] == "who made the seal: it is unsigned (accepted with --unsigned-ok)"


MALFORMED = {
    "empty body": b'{"body": {}}',
    "not JSON": b"{seal",
    "a list": b"[1, 2]",
    "empty file": b"",
    "binary": bytes(range(256)),
    "duplicate key": b'{"seq": 1, "seq": 2}',
    "NaN": b'{"seq": NaN}',
}


@pytest.mark.parametrize("name", sorted(MALFORMED))
def test_malformed_seal_file_is_one_line(sealed, name):
    sealed.seal.write_bytes(MALFORMED[name])
    line = refused_line(cli(sealed.db, "verify", "--seal", str(sealed.seal), "--public-key", str(sealed.pub)))
    assert "seal.json" in line and "not a valid seal file" in line, line


@pytest.mark.parametrize("change", [
    lambda d: d.update(seq="5"),
    lambda d: d.update(format="casefile seal file, version 3"),
    lambda d: d.update(extra=1),
    lambda d: d["body"].pop("tree_size"),
    lambda d: d["body"].update(tree_size=-1),
    lambda d: d.pop("file_signature"),  # signed body, unsigned file
    lambda d: d["body"].pop("signature"),  # signed file, unsigned body
    lambda d: d["file_signature"].update(public_key="a" * 64),  # the two signatures name different keys
    lambda d: d.update(body=[]),
])
def test_wrong_types_missing_or_extra_fields_are_one_line(sealed, change):
    doc = _doc(sealed.seal)
    change(doc)
    _write(sealed.seal, doc)
    line = refused_line(cli(sealed.db, "verify", "--seal", str(sealed.seal), "--public-key", str(sealed.pub)))
    assert "seal.json" in line and "not a valid seal file" in line, line


def test_missing_folder_or_huge_seal_file_is_one_line(sealed, tmp_path):
    line = refused_line(cli(sealed.db, "verify", "--seal", str(tmp_path / "absent.json")))
    assert "not found" in line, line
    line = refused_line(cli(sealed.db, "verify", "--seal", str(tmp_path)))
    assert "folder" in line, line
    big = tmp_path / "big.json"
    big.write_bytes(b" " * (2 * 1024 * 1024))
    line = refused_line(cli(sealed.db, "verify", "--seal", str(big)))
    assert "too large" in line, line


def _leaf_paths(doc, prefix=()):
    if isinstance(doc, dict):
        for k, v in doc.items():
            yield from _leaf_paths(v, (*prefix, k))
    else:
        yield prefix


@pytest.fixture(scope="module")
def sealed_once(tmp_path_factory):
    return make_sealed(tmp_path_factory.mktemp("mutations"))


def _flip_hex(s: str, i: int) -> str:
    i %= len(s)
    return s[:i] + ("0" if s[i] != "0" else "1") + s[i + 1:]


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_any_single_field_mutation_of_a_signed_seal_file_is_refused(sealed_once, tmp_path_factory, data):
    original = _doc(sealed_once.seal)
    doc = copy.deepcopy(original)
    path = data.draw(st.sampled_from(sorted(_leaf_paths(doc))))
    parent = doc
    for p in path[:-1]:
        parent = parent[p]
    old = parent[path[-1]]
    how = data.draw(st.sampled_from(["delete", "null", "replace", "flip"]))
    if how == "delete":
        del parent[path[-1]]
    elif how == "null":
        parent[path[-1]] = None
    elif how == "flip" and isinstance(old, str) and old:
        parent[path[-1]] = _flip_hex(old, data.draw(st.integers(0, 200)))
    else:
        parent[path[-1]] = data.draw(st.one_of(st.integers(-3, 10), st.booleans(), st.text(max_size=8),
                                               st.sampled_from(["0" * 64, "f" * 128, "2026-01-01T00:00:00Z"])))
    assume(doc != original)
    f = tmp_path_factory.mktemp("m") / "seal.json"
    _write(f, doc)
    with Ledger(str(sealed_once.db)) as led:
        try:
            r = led.verify(str(f), public_key=str(sealed_once.pub))
        except LedgerError as exc:
            assert "\n" not in str(exc) and str(f) in str(exc)
            return
    assert not r.ok, (path, how)
