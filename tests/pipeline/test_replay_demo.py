"""Replay on the demo, from the command line: every recorded demo case of both models reproduces, the
replays verify with the seal, and the sheet shows the latest replay; a changed input is refused in one
line naming both digests, exit 1, nothing written.

Outside sources: SHA-256 by Python's hashlib (FIPS 180-4) for the digests in the refusal; pypdf
(reference library) reads the sheet; what "reproduces" means is the project's (casefile.tolerances).
"""

from __future__ import annotations

import hashlib
import json
import os
import subprocess
import sys
from pathlib import Path

from pypdf import PdfReader

from casefile.ledger import Ledger
from demo_cases.train import ENTRY_POINT

from .conftest import copy_demo_ledger

ROOT = Path(__file__).resolve().parents[2]


def run(store: Path, *args: str) -> subprocess.CompletedProcess:
    env = {**os.environ, "CASEFILE_TRUSTED_ENTRY_POINTS": ENTRY_POINT,
           "CASEFILE_CONFIG_DIR": str(store.parent / "config")}
    return subprocess.run([sys.executable, "-m", "casefile.cli", "--store", str(store), *args],
                          capture_output=True, text=True, cwd=ROOT, env=env)


def test_every_demo_case_replays_and_reproduces(demo_dir, tmp_path):
    store = copy_demo_ledger(demo_dir, tmp_path)
    models = demo_dir / "scenario" / "models"
    inputs = demo_dir / "scenario" / "inputs"
    with Ledger(str(store), create=False) as led:
        n_cases = len(led.cases())
        head = led.head()
    total = 0
    for name in ("casting-honest", "casting-shortcut"):
        done = run(store, "replay", "--all", "--model", str(models / f"{name}.pt"), "--card",
                   str(models / f"{name}.card.json"), str(inputs), "--json")
        assert done.returncode == 0, done.stderr
        lines = [json.loads(x) for x in done.stdout.splitlines()]
        assert lines and all(x["reproduces"] and x["differences"] == [] for x in lines)
        total += len(lines)
    assert total == n_cases  # every recorded demo case
    with Ledger(str(store), create=False) as led:
        assert len(led.rows("replays")) == n_cases and led.head()[0] == head[0] + n_cases
        report = led.verify()
        assert report.ok, report.problem
        last = led.rows("replays")[-1]
    out = tmp_path / "s.pdf"
    assert run(store, "sheet", last["case_id"], "-o", str(out)).returncode == 0
    text = " ".join(p.extract_text() for p in PdfReader(str(out)).pages)
    assert "Latest replay" in text and f"seq {last['seq']}" in text and "reproduces" in text
    done = run(store, "history", last["case_id"])
    assert f"seq {last['seq']:>6}  replay" in done.stdout and "reproduces" in done.stdout


def test_a_changed_input_is_refused_in_one_line(demo_dir, tmp_path):
    store = copy_demo_ledger(demo_dir, tmp_path)
    models = demo_dir / "scenario" / "models"
    with Ledger(str(store), create=False) as led:
        row = next(r for r in led.cases() if r["file_name"].endswith(".png"))
        head = led.head()
    changed = tmp_path / row["file_name"]
    data = bytearray((demo_dir / "scenario" / "inputs" / row["file_name"]).read_bytes())
    data[-16] ^= 0x01
    changed.write_bytes(bytes(data))
    model = "casting-honest" if "honest" in row["model_name"] else "casting-shortcut"
    done = run(store, "replay", row["case_id"], "--model", str(models / f"{model}.pt"), "--card",
               str(models / f"{model}.card.json"), str(changed))
    assert done.returncode == 1 and done.stdout == ""
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and "input differs from case" in lines[0]
    assert hashlib.sha256(bytes(data)).hexdigest() in lines[0] and row["file_sha256"] in lines[0]
    with Ledger(str(store), create=False) as led:
        assert led.head() == head
