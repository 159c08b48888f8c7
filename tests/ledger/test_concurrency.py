"""Two writers at once, and a writer killed mid-batch: the ledger stays gap-free and verifies.

Both engines. Outside sources: SQLite's locking and WAL documentation (BEGIN IMMEDIATE gives one writer
at a time; a killed process loses only its open transaction) and PostgreSQL's documentation (Explicit
Locking, "Advisory Locks": a transaction-level lock is released at commit, rollback or disconnect). The
gap-free chain is casefile's own rule.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

from casefile.ledger import Ledger

ROOT = Path(__file__).resolve().parents[2]


def spawn(db: str, n: int, tag: str, batch: int = 1) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "tests.ledger.appender", str(db), str(n), tag, str(batch)],
                            cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def test_two_processes_append_500_each(store_url):
    db = store_url
    Ledger(db).close()
    a, b = spawn(db, 500, "A"), spawn(db, 500, "B")
    for p in (a, b):
        _, err = p.communicate(timeout=300)
        assert p.returncode == 0, err
    led = Ledger(db)
    seqs = [e.seq for e in led.entries()]
    assert seqs == list(range(1, 1001))  # gap-free, in order
    reasons = [e.body["reason"] for e in led.entries()]
    assert sum(r.startswith("A ") for r in reasons) == 500 and sum(r.startswith("B ") for r in reasons) == 500
    # each writer's own entries keep their order
    a_order = [int(r.split()[1]) for r in reasons if r.startswith("A ")]
    assert a_order == sorted(a_order)
    assert led.verify().ok


def test_sigkill_mid_batch_leaves_whole_entries_only(store_url):
    db = store_url
    Ledger(db).close()
    p = spawn(db, 100_000, "K", batch=7)  # seven entries per transaction
    assert p.stdout.readline().strip() == "ready"
    led = Ledger(db)
    deadline = time.monotonic() + 60
    while led.count() < 200 and time.monotonic() < deadline:
        time.sleep(0.05)
    os.kill(p.pid, signal.SIGKILL)
    p.wait()
    n = led.count()
    assert n >= 200
    assert n % 7 == 0  # a transaction of seven is either wholly there or wholly absent
    assert led.verify().ok
    # and the ledger takes new appends after the crash
    from tests.ledger.bodies import amendment_body

    e = led.append("amendment", amendment_body(1, "b" * 64))
    assert e.seq == n + 1 and led.verify().ok
