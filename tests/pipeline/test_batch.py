"""`casefile explain` over real batches: bad inputs, JSON lines, resume after SIGINT and SIGKILL.

Outside sources: POSIX signals (SIGINT may be caught, SIGKILL cannot), SQLite's durability of a
committed transaction; the explain_line schema (JSON Schema, jsonschema) for the JSON lines.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
from PIL import Image

from casefile import schemas
from casefile.errors import LedgerError
from casefile.ledger import Ledger
from casefile.models import load_model
from casefile.pipeline import record_case
from demo_cases.train import ENTRY_POINT

TRUSTED = (ENTRY_POINT,)  # the tests vouch for the demo's own factory, nothing else

ROOT = Path(__file__).resolve().parents[2]


def _env(store: Path) -> dict[str, str]:
    """The child's settings: its own site key, and the demo's factory trusted by name (as a site would)."""
    return {**os.environ, "CASEFILE_SITE_KEY": str(store.parent / "site.key"),
            "CASEFILE_CONFIG_DIR": str(store.parent / "config"), "CASEFILE_TRUSTED_ENTRY_POINTS": ENTRY_POINT}


def cli(store: Path, *args: str, **kw) -> subprocess.CompletedProcess:
    env = _env(store)
    return subprocess.run([sys.executable, "-m", "casefile.cli", "--store", str(store), *args],
                          capture_output=True, text=True, cwd=ROOT, env=env, **kw)


def spawn(store: Path, *args: str) -> subprocess.Popen:
    env = _env(store)
    return subprocess.Popen([sys.executable, "-m", "casefile.cli", "--store", str(store), *args], cwd=ROOT,
                            env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)


def test_json_lines_validate_and_rerun_skips(tmp_path, few_inputs, honest):
    store = tmp_path / "l.db"
    model, card = honest
    first = cli(store, "explain", "--model", model, "--card", card, "--patch", "16", "--stride", "8", "--json",
                "-q", str(few_inputs))
    assert first.returncode == 0, first.stderr
    lines = [json.loads(x) for x in first.stdout.splitlines()]
    assert len(lines) == 10
    for line in lines:
        schemas.validate("explain_line", line)  # raises when a line breaks the schema
        assert line["outcome"] == "recorded"
    led = Ledger(str(store), create=False)
    assert [line["hash"] for line in lines] == [e.hash for e in led.entries(kind="case")]
    again = cli(store, "explain", "--model", model, "--card", card, "--patch", "16", "--stride", "8", "--json",
                "-q", str(few_inputs))
    assert again.returncode == 0
    relines = [json.loads(x) for x in again.stdout.splitlines()]
    assert [x["outcome"] for x in relines] == ["skipped"] * 10
    assert [x["case_id"] for x in relines] == [x["case_id"] for x in lines]
    assert led.count() == 10 and led.verify().ok
    # other settings are another run: recorded anew, nothing before is touched
    third = cli(store, "explain", "--model", model, "--card", card, "--patch", "8", "--stride", "8", "-q",
                "--methods", "gradcam", str(sorted(few_inputs.iterdir())[0]))
    assert third.returncode == 0 and led.count("case") == 11 and led.verify().ok


def test_mixed_folder_records_good_files_and_reports_bad_ones(tmp_path, few_inputs, honest):
    model, card = honest
    strict_card = tmp_path / "strict.card.json"
    c = json.loads(Path(card).read_text())
    c["resize"] = "none"  # this card refuses any picture that is not 64 x 64
    c["weights"] = str(Path(card).parent / c["weights"])
    strict_card.write_text(json.dumps(c))
    folder = tmp_path / "mixed"
    folder.mkdir()
    good = sorted(few_inputs.iterdir())[:2]  # one DICOM, one PNG
    for g in good:
        shutil.copy(g, folder / g.name)
    png = (folder / good[1].name).read_bytes()
    (folder / "truncated.png").write_bytes(png[: len(png) // 2])
    (folder / "notes.txt").write_text("not an image\n")
    Image.fromarray(np.full((64, 80), 120, np.uint8)).save(folder / "wrong_size.png")
    store = tmp_path / "l.db"
    done = cli(store, "explain", "--model", model, "--card", str(strict_card), "--patch", "16", "--stride", "8",
               "--json", "-q", str(folder))
    assert done.returncode == 1  # failures make exit 1, but only at the end
    lines = {Path(json.loads(x)["input"]).name: json.loads(x) for x in done.stdout.splitlines()}
    assert {n for n, x in lines.items() if x["outcome"] == "recorded"} == {g.name for g in good}
    failed = {n: x["reason"] for n, x in lines.items() if x["outcome"] == "failed"}
    assert set(failed) == {"truncated.png", "notes.txt", "wrong_size.png"}
    assert "truncated" in failed["truncated.png"].lower() or "truncat" in failed["truncated.png"]
    assert "not a DICOM or raster image" in failed["notes.txt"]
    assert "80x64" in failed["wrong_size.png"] and "64x64" in failed["wrong_size.png"]
    for name, reason in failed.items():
        assert name in reason and "\n" not in reason  # one line naming the file
        assert f"failed: {folder / name}" in done.stderr or name in done.stderr
    led = Ledger(str(store), create=False)
    assert led.count("case") == 2 and led.count("failed") == 3
    assert {r["file_name"] for r in led.rows("failures")} == set(failed)
    assert led.verify().ok


def _count_cases(store: Path) -> int:
    """Cases recorded so far; 0 while the child is still creating the ledger (file absent, empty or
    without its tables yet: a read then is refused as "no ledger here", which is right for a user)."""
    try:
        led = Ledger(str(store), create=False)
    except LedgerError:
        return 0
    try:
        return led.count("case")
    finally:
        led.close()


def _interrupt_after(store: Path, args: list[str], n: int, sig: int) -> None:
    p = spawn(store, *args)
    deadline = time.monotonic() + 240
    while _count_cases(store) < n and time.monotonic() < deadline and p.poll() is None:
        time.sleep(0.2)
    if p.poll() is None:
        p.send_signal(sig)
    p.wait(timeout=120)


def test_interrupted_batches_record_every_input_exactly_once(tmp_path, few_inputs, honest):
    store = tmp_path / "l.db"
    model, card = honest
    args = ["explain", "--model", model, "--card", card, "--patch", "16", "--stride", "8", "-q", str(few_inputs)]
    _interrupt_after(store, args, 2, signal.SIGINT)
    led = Ledger(str(store), create=False)
    after_int = led.count("case")
    assert 2 <= after_int <= 10 and led.verify().ok
    _interrupt_after(store, args, after_int + 2, signal.SIGKILL)
    after_kill = led.count("case")
    assert after_kill >= after_int and led.verify().ok
    final = cli(store, *args)
    assert final.returncode == 0, final.stderr
    digests = [r["file_sha256"] for r in led.cases()]
    assert len(digests) == 10 and len(set(digests)) == 10  # every input exactly once
    assert f"skipped as already recorded {after_kill}" in final.stderr
    assert led.verify().ok


def test_python_api_records_a_known_prediction(tmp_path, few_inputs, honest):
    loaded = load_model(*honest, trusted_entry_points=TRUSTED)
    path = sorted(few_inputs.iterdir())[0]
    out = record_case(str(tmp_path / "api.db"), loaded, str(path), prediction="crack",
                      key=str(tmp_path / "site.key"))
    assert out.outcome == "recorded"
    body = out.body
    assert body["result"]["label"] == "crack" and body["result"]["source"] == "caller"
    assert body["model"]["digest"] == loaded.digest
    again = record_case(str(tmp_path / "api.db"), loaded, str(path), prediction="crack",
                        key=str(tmp_path / "site.key"))
    assert again.outcome == "skipped" and again.case_id == out.case_id


def test_torchscript_with_gradcam_is_refused_before_any_input(tmp_path, few_inputs, demo_dir):
    models = demo_dir / "scenario" / "models"
    store = tmp_path / "ts.db"
    done = cli(store, "explain", "--model", str(models / "casting-honest.ts"), "--card",
               str(models / "casting-honest.ts.card.json"), "-q", str(few_inputs))
    assert done.returncode == 1 and "TorchScript" in done.stderr and done.stderr.count("\n") == 1
    assert _count_cases(store) == 0
    ok = cli(store, "explain", "--model", str(models / "casting-honest.ts"), "--card",
             str(models / "casting-honest.ts.card.json"), "--methods", "occlusion,gradient", "--patch", "16",
             "--stride", "8", "-q", str(sorted(few_inputs.iterdir())[0]))
    assert ok.returncode == 0, ok.stderr
    led = Ledger(str(store), create=False)
    assert led.count("case") == 1 and led.count("failed") == 0


def test_python_api_with_a_scan_checks_the_ledger_before_explaining(tmp_path, few_inputs, honest, monkeypatch):
    from casefile import pipeline
    from casefile.imaging import load

    loaded = load_model(*honest, trusted_entry_points=TRUSTED)
    scan = load(sorted(few_inputs.iterdir())[1], key=str(tmp_path / "site.key"))
    first = record_case(str(tmp_path / "api.db"), loaded, scan)
    assert first.outcome == "recorded" and first.body["result"]["source"] == "casefile"

    def explain_again(*_a, **_k):
        raise AssertionError("an input already recorded must not be explained again")

    monkeypatch.setattr(pipeline, "explain_scan", explain_again)
    again = record_case(str(tmp_path / "api.db"), loaded, scan)
    assert again.outcome == "skipped" and again.case_id == first.case_id
