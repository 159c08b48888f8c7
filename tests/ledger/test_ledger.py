"""Ledger behaviour: schema refusal writes nothing, amendments keep history, seals sign and verify.

Outside sources: 21 CFR 11.10(e) (a correction must not obscure what was recorded), RFC 8032
(Ed25519, through the cryptography package); the schemas are JSON Schema 2020-12 (jsonschema). The
tests on ``led`` run on both engines (a SQLite file, and a throwaway PostgreSQL server).
"""

from __future__ import annotations

import subprocess
import sys

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from casefile.errors import ValidationError
from casefile.ledger import Ledger, generate_key
from casefile.ledger import postgres as pg
from casefile.ledger import tables as t
from tests.ledger.bodies import amendment_body, case_body
from tests.ledger.rawdb import Raw


@pytest.fixture()
def led(store_url: str):
    ledger = Ledger(store_url)
    yield ledger
    ledger.close()


def test_invalid_body_refused_and_nothing_written(led):
    led.append("case", case_body(1))
    bad = case_body(2)
    del bad["model"]
    with pytest.raises(ValidationError, match="case body refused.*model"):
        led.append("case", bad)
    bad = case_body(3)
    bad["status"] = "fine"
    with pytest.raises(ValidationError, match="status"):
        led.append("case", bad)
    with pytest.raises(ValidationError, match="not allowed"):
        led.append("case", {**case_body(4), "result": {**case_body(4)["result"], "confidence": float("nan")}})
    with pytest.raises(ValidationError, match="unknown entry kind"):
        led.append("verdict", {})
    # a batch with one bad member writes none of it
    with pytest.raises(ValidationError):
        led.append_many([("case", case_body(5), None), ("case", {"case_id": "x"}, None)])
    assert led.count() == 1 and led.verify().ok


def test_blob_must_be_referred_to_and_present(led):
    with pytest.raises(ValidationError, match="not referred to"):
        led.append("case", case_body(1), blobs=[b"stray"])
    with pytest.raises(ValidationError, match="neither given nor stored"):
        led.append("case", case_body(1, blob=b"absent"))
    e = led.append("case", case_body(1, blob=b"png"), blobs=[b"png"])
    assert led.blob(e.body["input"]["display_blob"]) == b"png"
    # a later entry may refer to a blob stored earlier
    led.append("case", case_body(2, blob=b"png"))
    assert led.count() == 2 and led.verify().ok


def test_same_run_is_not_recorded_twice(led):
    led.append("case", case_body(1))
    body = case_body(1)
    body["case_id"] = "c-other"
    with pytest.raises(ValidationError, match="already recorded"):
        led.append("case", body)
    b = case_body(1)["input"]
    assert led.find_case_id(b["file_sha256"], None, case_body(1)["model"]["digest"],
                            case_body(1)["settings_digest"]) == "c-000001"


def test_amendment_keeps_both_and_history_reads_in_order(led):
    e = led.append("case", case_body(1))
    led.append("case", case_body(2))
    a = led.append("amendment", {**amendment_body(e.seq, e.hash), "case_id": "c-000001",
                                 "changes": {"label": "crack"}})
    hist = led.case("c-000001")
    assert hist.entry.body["result"]["label"] == "sound"  # the original is untouched
    assert [x.seq for x in hist.timeline()] == [1, a.seq]
    assert led.verify().ok


def test_query_filters(led):
    led.append("case", case_body(1, label="sound", when="2026-11-01T00:00:00Z"))
    led.append("case", case_body(2, label="crack", status="fail", when="2026-11-15T00:00:00Z"))
    led.append("case", case_body(3, label="crack", model="other", when="2026-11-20T00:00:00Z"))
    assert [r["case_id"] for r in led.cases(label="crack")] == ["c-000002", "c-000003"]
    assert [r["case_id"] for r in led.cases(status="fail")] == ["c-000002"]
    assert [r["case_id"] for r in led.cases(model="other")] == ["c-000003"]
    assert [r["case_id"] for r in led.cases(since="2026-11-10", until="2026-11-16")] == ["c-000002"]


def test_signed_seal_and_key_checks(led, tmp_path):
    key = tmp_path / "seal.key"
    pub = generate_key(key)
    other = tmp_path / "other.key"
    other_pub = generate_key(other)
    for i in range(3):
        led.append("case", case_body(i))
    f = tmp_path / "seal.json"
    s = led.seal(str(key), output=f)
    assert s.body["signature"]["algorithm"] == "Ed25519" and s.body["tree_size"] == 3
    assert led.verify(str(f), public_key=str(pub)).ok
    r = led.verify(str(f), public_key=str(other_pub))
    assert not r.ok and r.failure == "trust" and "not a trusted key" in r.problem
    # a seal file whose root was edited no longer carries a valid signature
    f.write_bytes(f.read_bytes().replace(s.body["merkle_root"].encode(), b"0" * 64))
    r = led.verify(str(f), public_key=str(pub))
    assert not r.ok and "altered" in r.problem


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.lists(st.tuples(st.sampled_from(["sound", "crack", "porosity"]),
                          st.sampled_from(["pass", "warn", "fail", "not-run"]),
                          st.text(min_size=1, max_size=20).filter(lambda s: s.strip())), min_size=1, max_size=12))
def test_any_valid_sequence_appends_and_verifies(tmp_path_factory, items):
    led = Ledger(str(tmp_path_factory.mktemp("p") / "l.db"))
    for i, (label, status, reason) in enumerate(items):
        led.append("case", case_body(i, label=label, status=status))
        led.append("amendment", amendment_body(1, "c" * 64, reason))
    r = led.verify()
    assert r.ok and r.entries == 2 * len(items)
    led.close()


def test_cli_init_seal_verify_audit(tmp_path, store_url):
    db = store_url
    run = lambda *a: subprocess.run([sys.executable, "-m", "casefile.cli", "--store", db, *a],  # noqa: E731
                                    capture_output=True, text=True)
    assert run("init").returncode == 0 and run("init").returncode == 0  # safe to repeat
    led = Ledger(db)
    led.append("case", case_body(1))
    led.close()
    out = run("seal", "-o", str(tmp_path / "s.json"), "--json")
    assert out.returncode == 0 and '"tree_size": 1' in out.stdout
    unsigned = run("verify", "--seal", str(tmp_path / "s.json"))
    assert unsigned.returncode == 1 and "unsigned" in unsigned.stdout  # an unsigned seal proves no signer
    accepted = run("verify", "--seal", str(tmp_path / "s.json"), "--unsigned-ok")
    assert accepted.returncode == 0 and "does not prove: who made the seal" in accepted.stdout
    audit = run("audit", "--json")
    assert audit.returncode == 0 and '"case_id": "c-000001"' in audit.stdout and audit.stdout.count("\n") == 1
    assert "c-000001" in run("audit", "--csv").stdout
    assert run("audit", "--kind", "seal", "--json").stdout.count("merkle_root") == 1
    bad = run("--store", str(tmp_path / "missing.db"), "verify")
    assert bad.returncode == 1 and "no ledger here" in bad.stderr
    assert run("verify", "--no-such-flag").returncode == 2


def test_query_tables_can_be_rebuilt_from_the_entries(led, tmp_path):
    led.append("case", case_body(1, blob=b"png"), blobs=[b"png"])
    led.append("case", case_body(2, label="crack"))
    led.append("amendment", amendment_body(1, "d" * 64))
    before = {name: led.rows(name) for name in ("cases", "amendments", "entry_blobs")}
    con = Raw(led.file or led.url)
    # the query tables are guarded: an attacker drops their triggers first
    derived = [(table, name) for table, name in pg.TRIGGERS if table in {tb.name for tb in t.DERIVED_TABLES}] \
        if con.postgres else [("", name) for name in t.DERIVED_TRIGGER_NAMES]
    for table, name in derived:
        con.execute(f"DROP TRIGGER {name}" + (f" ON {table}" if con.postgres else ""))
    con.execute("UPDATE cases SET label = 'porosity' WHERE seq = 2")
    con.execute("DELETE FROM entry_blobs")
    con.close()
    r = led.verify()
    assert not r.ok and r.first_bad_seq == 1 and "derived row" in r.problem
    with pytest.raises(ValidationError, match="reason is empty"):
        led.rebuild_derived("  ")
    assert led.count() == 3  # refused before anything was written
    e = led.rebuild_derived("query tables changed by hand")
    assert e.seq == 4 and e.kind == "rebuild" and e.body["entries"] == 3
    assert e.body["rows"]["cases"] == 2 and e.body["rows"]["entry_blobs"] == 1
    assert {name: led.rows(name) for name in before} == before
    assert led.verify().ok
    con = Raw(led.file or led.url)
    names = con.triggers()
    con.close()
    want = {name for _, name in pg.TRIGGERS} if con.postgres else set(t.TRIGGER_NAMES)
    assert want <= names  # the rebuild put the guards back
