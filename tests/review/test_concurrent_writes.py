"""Two rules that hold across processes: a reader reads a case once per draw, and an account for a
reader id is made once. Several processes try at the same moment; exactly one is recorded, the others
are refused, on SQLite and on a real PostgreSQL server.

Outside sources: none for the values (the rules are this project's, README "Second reads" and "The
review page"); the concurrency is real: separate processes and the database engines' own locking.
"""

from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import pytest

from casefile.ledger import Ledger
from casefile.review import draw
from tests.ledger.bodies import case_body

CHILD = Path(__file__).with_name("race_child.py")
ROOT = Path(__file__).resolve().parents[2]
RACERS = 4


@pytest.fixture(params=["sqlite", "postgresql"])
def url(request, tmp_path) -> str:
    if request.param == "sqlite":
        return str(tmp_path / "race.db")
    return request.getfixturevalue("pg_url")


def _race(url: str, go: Path, *args: str) -> list[str]:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    procs = [subprocess.Popen([sys.executable, str(CHILD), url, str(go), *args], stdout=subprocess.PIPE,
                              text=True, env=env) for _ in range(RACERS)]
    for p in procs:
        assert p.stdout.readline().strip() == "ready"
    time.sleep(0.2)
    go.touch()
    outs = []
    for p in procs:
        out, _ = p.communicate(timeout=120)
        assert p.returncode == 0
        outs.append(out.strip())
    return outs


def test_one_reading_per_reader_case_and_draw(url, tmp_path):
    with Ledger(url) as led:
        for i in range(1, 4):
            led.append("case", case_body(i))
        d = draw(led, "random", size=3, seed=1).body["draw_id"]
    outs = _race(url, tmp_path / "go", "review", d)
    assert sum(o.startswith("recorded") for o in outs) == 1, outs
    assert all("rad-01 already read this case" in o for o in outs if o.startswith("refused")), outs
    with Ledger(url) as led:
        assert led.count("review") == 1 and led.verify().ok


def test_one_account_per_reader_id(url, tmp_path):
    Ledger(url).close()
    outs = _race(url, tmp_path / "go", "reader")
    assert sum(o.startswith("recorded") for o in outs) == 1, outs
    assert all("already has an account" in o for o in outs if o.startswith("refused")), outs
    with Ledger(url) as led:
        assert led.count("reader") == 1 and led.verify().ok
