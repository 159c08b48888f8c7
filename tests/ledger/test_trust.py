"""Trust: a seal proves who made it only through a key the verifier trusts; key files are refused in one line.

No outside source applies to the trust rules: they are casefile's own, as documented in
casefile/ledger/trust.py and SECURITY.md. The key formats are PKCS#8 / SubjectPublicKeyInfo PEM
(RFC 8410 for Ed25519 keys), read through the `cryptography` package.
"""

from __future__ import annotations

import os

import pytest
from cryptography.hazmat.primitives import serialization
from cryptography.hazmat.primitives.asymmetric import rsa
from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

from casefile.errors import LedgerError
from casefile.ledger import Ledger, generate_key, load_public_key
from tests.ledger.bodies import case_body
from tests.ledger.sealing import cli, make_sealed, refused_line


@pytest.fixture()
def sealed(tmp_path):
    return make_sealed(tmp_path)


def test_seal_signed_by_an_untrusted_key_fails(sealed):
    done = cli(sealed.db, "verify", "--seal", str(sealed.seal), "--public-key", str(sealed.other_pub))
    assert done.returncode == 1 and "NOT verified" in done.stdout and "not a trusted key" in done.stdout
    ok = cli(sealed.db, "verify", "--seal", str(sealed.seal), "--public-key", str(sealed.pub))
    assert ok.returncode == 0 and "are exactly the history sealed at seq 5 by key" in ok.stdout


def test_signed_seal_without_any_trusted_key_fails_unless_unsigned_ok(sealed):
    done = cli(sealed.db, "verify", "--seal", str(sealed.seal))
    assert done.returncode == 1 and "no key is trusted" in done.stdout
    ok = cli(sealed.db, "verify", "--seal", str(sealed.seal), "--unsigned-ok")
    assert ok.returncode == 0
    assert "proves: the ledger matches this seal file" in ok.stdout
    assert "does not prove: who made the seal: its key" in ok.stdout


def test_site_trusted_keys_count_as_trusted(sealed, monkeypatch):
    monkeypatch.setenv("CASEFILE_TRUSTED_KEYS", str(sealed.pub))
    with Ledger(str(sealed.db)) as led:
        r = led.verify(str(sealed.seal))
        assert r.ok and r.external_seal.trust == "trusted" and "site trusted key" in r.external_seal.because
        assert not led.verify(str(sealed.seal), site_keys=False).ok
    # a raw 64-hex key in the site settings works too
    monkeypatch.setenv("CASEFILE_TRUSTED_KEYS", load_public_key(sealed.pub))
    assert cli(sealed.db, "verify", "--seal", str(sealed.seal)).returncode == 0


def test_inner_seals_are_checked_against_the_trusted_keys(sealed, monkeypatch):
    # no seal file: the seal entry inside the ledger is judged by the trusted keys
    monkeypatch.setenv("CASEFILE_TRUSTED_KEYS", str(sealed.other_pub))
    with Ledger(str(sealed.db)) as led:
        r = led.verify()
        assert not r.ok and r.first_bad_seq == 5 and r.failure == "trust" and "not a trusted key" in r.problem
    monkeypatch.delenv("CASEFILE_TRUSTED_KEYS")
    with Ledger(str(sealed.db)) as led:
        r = led.verify()  # no trusted key at all: checked against the key it carries, and said so
    assert r.ok and r.seal_trust == {"trusted": 0, "untrusted": 1, "unsigned": 0}
    assert any("checked only against the keys the seals carry" in n for n in r.notes)


def test_a_key_hands_over_to_its_successor(sealed, tmp_path):
    new_pub = sealed.other_pub
    with Ledger(str(sealed.db)) as led:
        handover = led.seal(str(sealed.key), successor=str(new_pub))
        assert handover.body["successor"] == load_public_key(new_pub)
        n = led.count()
        with pytest.raises(LedgerError, match="handed over"):
            led.seal(str(sealed.key))  # the old key signs no more: refused before anything is written
        assert led.count() == n
        led.append("case", case_body(99))
        later = tmp_path / "later.json"
        led.seal(str(sealed.other_key), output=later)
        r = led.verify(str(later), public_key=str(sealed.pub))  # the auditor trusts only the old key
        assert r.ok and r.external_seal.trust == "trusted" and "successor of key" in r.external_seal.because
        r = led.verify(str(later), public_key=str(new_pub))  # the new key alone does not vouch for older seals
        assert not r.ok and r.first_bad_seq == 5 and r.failure == "trust"


def test_handover_refusals(sealed):
    with Ledger(str(sealed.db)) as led:
        with pytest.raises(LedgerError, match="its own successor"):
            led.seal(str(sealed.key), successor=str(sealed.pub))
        with pytest.raises(LedgerError, match="signed seal"):
            led.seal(successor=str(sealed.other_pub))
        assert led.count() == 5


def test_seal_and_successor_entries_are_made_only_by_seal(sealed):
    with Ledger(str(sealed.db)) as led:
        body = dict(led.get(5).body)
        with pytest.raises(Exception, match="computed from the ledger"):
            led.append("seal", body)
        with pytest.raises(Exception, match="computed from the ledger"):
            led.append("rebuild", {"rebuilt_at": "2026-01-01T00:00:00Z", "reason": "x", "entries": 0, "rows": {}})
        assert led.count() == 5


def _rsa_pem(private: bool) -> bytes:
    key = rsa.generate_private_key(public_exponent=65537, key_size=1024)
    if private:
        return key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
                                 serialization.NoEncryption())
    return key.public_key().public_bytes(serialization.Encoding.PEM, serialization.PublicFormat.SubjectPublicKeyInfo)


PUBLIC_KEY_FILES = {
    "not PEM": (b"hello, I am a key", "not a PEM public key"),
    "empty": (b"", "empty"),
    "binary": (bytes(range(256)) * 4, "not a PEM public key"),
    "RSA key": (_rsa_pem(False), "not an Ed25519 key"),
    "broken PEM": (b"-----BEGIN PUBLIC KEY-----\nAAAA\n-----END PUBLIC KEY-----\n", "not a PEM public key casefile"),
    "huge": (b"-----BEGIN " + b"A" * 100_000, "too large"),
}


@pytest.mark.parametrize("name", sorted(PUBLIC_KEY_FILES))
def test_malformed_public_key_file_is_one_line(sealed, tmp_path, name):
    data, words = PUBLIC_KEY_FILES[name]
    f = tmp_path / "bad.pub"
    f.write_bytes(data)
    line = refused_line(cli(sealed.db, "verify", "--seal", str(sealed.seal), "--public-key", str(f)))
    assert "bad.pub" in line and words in line, line
    line = refused_line(cli(sealed.db, "verify", "--public-key", str(f)))
    assert "bad.pub" in line and words in line, line


def test_missing_public_key_and_bad_site_key_are_one_line(sealed, tmp_path, monkeypatch):
    line = refused_line(cli(sealed.db, "verify", "--public-key", str(tmp_path / "absent.pub")))
    assert "not found" in line, line
    line = refused_line(cli(sealed.db, "verify", "--public-key", str(tmp_path)))
    assert "folder" in line, line
    (tmp_path / "junk.pub").write_text("junk")
    monkeypatch.setenv("CASEFILE_TRUSTED_KEYS", str(tmp_path / "junk.pub"))
    line = refused_line(cli(sealed.db, "verify"))
    assert "junk.pub" in line, line


def _private(tmp_path, data: bytes, mode: int = 0o600):
    f = tmp_path / "bad.key"
    f.write_bytes(data)
    os.chmod(f, mode)
    return f


@pytest.mark.parametrize("data, mode, words", [
    (b"not a key", 0o600, "not a PEM private key"),
    (b"", 0o600, "empty"),
    (_rsa_pem(True), 0o600, "not an Ed25519 key"),
    (Ed25519PrivateKey.generate().private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
                                                serialization.BestAvailableEncryption(b"pw")), 0o600, "encrypted"),
    (Ed25519PrivateKey.generate().private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
                                                serialization.NoEncryption()), 0o644, "chmod 600"),
])
def test_malformed_private_key_is_refused_before_any_write(sealed, tmp_path, data, mode, words):
    f = _private(tmp_path, data, mode)
    line = refused_line(cli(sealed.db, "seal", "--key", str(f), "-o", str(tmp_path / "s.json")))
    assert "bad.key" in line and words in line, line
    with Ledger(str(sealed.db)) as led:
        assert led.count() == 5  # nothing recorded
    assert not (tmp_path / "s.json").exists()


def test_seal_output_is_checked_before_the_seal_is_recorded(sealed, tmp_path):
    line = refused_line(cli(sealed.db, "seal", "--key", str(sealed.key), "-o", str(tmp_path / "no" / "s.json")))
    assert "does not exist" in line, line
    line = refused_line(cli(sealed.db, "seal", "--key", str(sealed.key), "-o", str(tmp_path)))
    assert "folder" in line, line
    with Ledger(str(sealed.db)) as led:
        assert led.count() == 5


def test_keygen_refuses_to_overwrite_and_names_the_key(tmp_path):
    done = cli(tmp_path / "l.db", "keygen", str(tmp_path / "k"))
    assert done.returncode == 0 and load_public_key(tmp_path / "k.pub") in done.stdout
    assert (os.stat(tmp_path / "k").st_mode & 0o777) == 0o600
    line = refused_line(cli(tmp_path / "l.db", "keygen", str(tmp_path / "k")))
    assert "already exists" in line, line
    (tmp_path / "j.pub").write_text("someone's key")
    line = refused_line(cli(tmp_path / "l.db", "keygen", str(tmp_path / "j")))
    assert "j.pub" in line and "already exists" in line, line
    assert not (tmp_path / "j").exists()
    line = refused_line(cli(tmp_path / "l.db", "keygen", str(tmp_path / "none" / "k")))
    assert "does not exist" in line, line


def test_trusted_key_beside_the_ledger_is_noted(tmp_path):
    db = tmp_path / "l.db"
    pub = generate_key(tmp_path / "k")
    with Ledger(str(db)) as led:
        led.append("case", case_body(1))
        led.seal(str(tmp_path / "k"), output=tmp_path / "s.json")
        r = led.verify(str(tmp_path / "s.json"), public_key=str(pub))
    assert r.ok and any("lies in the ledger's own folder" in n for n in r.notes)
