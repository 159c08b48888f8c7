"""Parallel explain through claims: a worker killed with SIGKILL while holding claims is taken over, and each
input is recorded exactly once; `explain --workers 2` records every input once.

Outside sources: PostgreSQL's documentation (SELECT, "The Locking Clause": FOR UPDATE SKIP LOCKED skips
rows another transaction has locked) and POSIX (SIGKILL cannot be caught: the worker gets no chance to
release its claims). The inputs are seeded random pictures; each case's input digest is recomputed with
hashlib's SHA-256 to count the inputs recorded.
"""

from __future__ import annotations

import hashlib
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from casefile.errors import UsageError
from casefile.ledger import Ledger
from casefile.models import load_model
from casefile.pipeline import RunSettings
from casefile.workers import explain_claimed, explain_parallel
from demo_cases.train import ENTRY_POINT

ROOT = Path(__file__).resolve().parents[2]
# the state-dict model through its trusted entry point (a .pt2 archive explains far slower)
ENV = {**os.environ, "CASEFILE_TRUSTED_ENTRY_POINTS": ENTRY_POINT}


def _inputs(folder: Path, n: int) -> dict[str, str]:
    """``n`` seeded 32 x 32 grey pictures; their SHA-256 → name."""
    folder.mkdir()
    rng = np.random.default_rng(23)
    out = {}
    for i in range(n):
        path = folder / f"part_{i:04d}.png"
        Image.fromarray(rng.integers(0, 255, (32, 32), dtype=np.uint8)).save(path)
        out[hashlib.sha256(path.read_bytes()).hexdigest()] = path.name
    return out


def test_a_killed_workers_claims_are_taken_over_and_each_input_recorded_once(tmp_path, tiny, pg_url):
    digests = _inputs(tmp_path / "inputs", 8)
    Ledger(pg_url).close()
    doomed = subprocess.Popen([sys.executable, "-m", "tests.pipeline.claim_worker", pg_url, str(tiny["weights"]),
                               str(tiny["card"]), str(tmp_path / "inputs")], cwd=ROOT, stdout=subprocess.PIPE,
                              stderr=subprocess.PIPE, text=True, env=ENV)
    assert doomed.stdout.readline().strip() == "ready", doomed.stderr.read()
    led = Ledger(pg_url)
    deadline = time.monotonic() + 120
    while not led.cases() and time.monotonic() < deadline:
        time.sleep(0.02)
    held = [r for r in led.engine.connect().exec_driver_sql(
        "SELECT input FROM claims WHERE worker = 'doomed' AND done = 0")]
    os.kill(doomed.pid, signal.SIGKILL)
    doomed.wait()
    assert held, "the worker must hold claims when it is killed for this test to mean anything"
    before = len(led.cases())
    loaded = load_model(tiny["weights"], tiny["card"], trusted_entry_points=(ENTRY_POINT,))
    summary = explain_claimed(led, [tmp_path / "inputs"], loaded, RunSettings(patch=8, stride=4), timeout=1.0,
                              poll=0.2)
    cases = led.cases()
    assert sorted(c["file_sha256"] for c in cases) == sorted(digests)  # every input once, none twice
    assert summary.recorded == 8 - before and not summary.failed and led.count("failed") == 0
    assert led.engine.connect().exec_driver_sql("SELECT COUNT(*) FROM claims WHERE done = 0").scalar() == 0
    assert led.verify().ok
    led.close()


def test_cli_explain_with_two_workers_records_each_input_once(tmp_path, tiny):
    digests = _inputs(tmp_path / "inputs", 6)
    store = tmp_path / "l.db"
    env = {**ENV, "CASEFILE_CONFIG_DIR": str(tmp_path / "config")}
    cmd = [sys.executable, "-m", "casefile.cli", "--store", str(store), "explain", "--model", str(tiny["weights"]),
           "--card", str(tiny["card"]), "--patch", "8", "--stride", "4", "--workers", "2", "--json", "-q",
           str(tmp_path / "inputs")]
    done = subprocess.run(cmd, capture_output=True, text=True, cwd=ROOT, env=env, timeout=600)
    assert done.returncode == 0, done.stderr
    lines = [json.loads(x) for x in done.stdout.splitlines()]
    assert sorted(x["input_digest"] for x in lines) == sorted(digests) and {x["outcome"] for x in lines} == {
        "recorded"}
    again = subprocess.run(cmd, capture_output=True, text=True, cwd=ROOT, env=env, timeout=600)
    # the listing is done: nothing is looked at again, and the summary says so
    assert again.returncode == 0 and again.stdout == "" and "skipped as already recorded 6" in again.stderr
    with Ledger(str(store)) as led:
        assert led.count("case") == 6 and led.verify().ok


@pytest.mark.parametrize("bad", ["0", "-1", "two"])
def test_workers_must_be_a_positive_whole_number(tmp_path, bad):
    done = subprocess.run([sys.executable, "-m", "casefile.cli", "--store", str(tmp_path / "l.db"), "explain",
                           "--model", "m", "--card", "c", "--workers", bad, "x"], capture_output=True, text=True,
                          cwd=ROOT)
    assert done.returncode == 2 and "--workers" in done.stderr and not (tmp_path / "l.db").exists()


@pytest.mark.parametrize("threads", [0, -2, 1.5, True])
def test_threads_per_worker_must_be_a_whole_number_and_nothing_is_claimed(tmp_path, tiny, threads):
    folder = tmp_path / "inputs"
    _inputs(folder, 2)
    store = str(tmp_path / "l.db")
    Ledger(store).close()
    loaded = load_model(tiny["weights"], tiny["card"], trusted_entry_points=(ENTRY_POINT,))
    with pytest.raises(UsageError, match="threads per worker must be a whole number of at least 1"):
        explain_parallel(store, [folder], str(tiny["weights"]), str(tiny["card"]), RunSettings(patch=8, stride=4),
                         loaded=loaded, workers=2, threads=threads)
    with Ledger(store) as led, led.engine.connect() as conn:
        assert led.count() == 0 and conn.exec_driver_sql("SELECT count(*) FROM claims").scalar() == 0
