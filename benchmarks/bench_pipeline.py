"""Whole-pipeline throughput on the demo model, the share of time outside the explanation methods, and
memory over a long batch. Prints; asserts nothing.

Goals (issue 6): time outside the explanation methods (loading, hashing, recording, sheets) at most
15 % of the total; memory growth under 50 MB from case 100 to case 2,000.
Usage: python benchmarks/bench_pipeline.py [N_CASES] (default 2000; the demo model trains first).
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import numpy as np  # noqa: E402
import psutil  # noqa: E402

import casefile.explain as explain_room  # noqa: E402
from casefile.ledger import Ledger  # noqa: E402
from casefile.models import load_model  # noqa: E402
from casefile.pipeline import RunSettings, explain_one, preflight, write_sheet  # noqa: E402
from demo_cases.scenario import make_case  # noqa: E402
from demo_cases.train import ENTRY_POINT, train  # noqa: E402
from demo_cases.writers import write_png  # noqa: E402


def main(n_cases: int = 2000) -> None:
    tmp = Path(tempfile.mkdtemp())
    paths = train(7, shortcut=False, out_dir=tmp / "models")
    loaded = load_model(paths["weights"], paths["card"], trusted_entry_points=[ENTRY_POINT])
    rng = np.random.default_rng(1)
    inputs = tmp / "inputs"
    inputs.mkdir()
    files = []
    for i in range(n_cases):
        f = inputs / f"c{i:05d}.png"
        write_png(f, make_case(rng, i % 4, marker=bool(i % 2)))
        files.append(f)
    led = Ledger(str(tmp / "l.db"))
    run = RunSettings(patch=16, stride=8)

    inside = 0.0
    real_run = explain_room.run

    def timed_run(*a, **k):
        nonlocal inside
        t = time.perf_counter()
        try:
            return real_run(*a, **k)
        finally:
            inside += time.perf_counter() - t

    explain_room.run = timed_run
    proc = psutil.Process()
    rss_at_100 = None
    sheets = 0.0
    settings = preflight(loaded, run.with_limits())  # checked once, as a batch does
    t0 = time.perf_counter()
    for i, f in enumerate(files, 1):
        out = explain_one(led, f, loaded, run, key=str(tmp / "site.key"), settings=settings)
        ts = time.perf_counter()
        write_sheet(led, out.case_id, tmp / "sheets")
        sheets += time.perf_counter() - ts
        if i == 100:
            rss_at_100 = proc.memory_info().rss
    total = time.perf_counter() - t0
    explain_room.run = real_run
    rss_end = proc.memory_info().rss
    print(f"{n_cases} demo cases, methods gradcam+occlusion(16/8)+gradient, all checks, one sheet each")
    print(f"  throughput: {n_cases / total:.2f} cases/s ({total / n_cases * 1000:.0f} ms per case)")
    print(f"  time inside casefile.explain.run: {inside / total:.1%}; outside (load, hash, record, "
          f"sheet): {1 - inside / total:.1%} (goal <= 15 %); sheets alone {sheets / total:.1%}")
    if rss_at_100:
        print(f"  RSS at case 100: {rss_at_100 / 2**20:.0f} MiB, at case {n_cases}: {rss_end / 2**20:.0f} MiB, "
              f"growth {(rss_end - rss_at_100) / 2**20:.1f} MiB (goal < 50 MB)")
    print(f"  ledger verify: {led.verify().summary()}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 2000)
