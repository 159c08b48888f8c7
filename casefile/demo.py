"""The demo: the whole job on a synthetic scenario of our own (placeholder until the pipeline lands)."""

from __future__ import annotations

import os

from casefile.ledger import Ledger


def run_demo(out_dir: str) -> int:
    os.makedirs(out_dir, exist_ok=True)
    path = os.path.join(out_dir, "casefile.db")
    ledger = Ledger(path)
    report = ledger.verify()
    print(f"ledger at {path}: {report.summary()}")
    return 0 if report.ok else 1
