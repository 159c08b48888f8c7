"""Prints the period report's time and peak memory over ledgers of 10,000 and 100,000 invented cases,
side by side, to show that it aggregates in SQL (memory flat in the number of cases) and its goal
(a 100,000-case ledger in 10 s or less). Run alone: the machine is small and shared.

    python benchmarks/bench_report.py [N ...]     default 10000 100000
"""

from __future__ import annotations

import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

from casefile.ledger import Ledger
from casefile.report import period_figures, render_report
from casefile.review import draw
from demo_cases.period import populate, read_draw

GOAL_S = 10.0
DAYS = 90


def measure(n: int, folder: Path) -> dict[str, float]:
    led = Ledger(str(folder / f"r{n}.db"), synchronous="NORMAL")
    t0 = time.perf_counter()
    populate(led, n, days=DAYS, seed=1, failures=n // 50)
    d = draw(led, "random", size=200, seed=1, filters={"since": "2026-10-01T00:00:00Z"})
    read_draw(led, d.body, seed=1)
    fill = time.perf_counter() - t0
    led.close()
    led = Ledger(str(folder / f"r{n}.db"))
    tracemalloc.start()
    t0 = time.perf_counter()
    fig = period_figures(led, "2026-10-01", "2026-11-29")  # the last 60 days: two thirds of the cases
    t_fig = time.perf_counter() - t0
    pdf = render_report(fig)
    t_all = time.perf_counter() - t0
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    led.close()
    return {"n": n, "fill": fill, "figures": t_fig, "total": t_all, "peak_mb": peak / 2**20,
            "in_period": fig["cases"]["total"], "pdf_kb": len(pdf) / 1024}


def main() -> None:
    sizes = [int(a) for a in sys.argv[1:]] or [10_000, 100_000]
    with tempfile.TemporaryDirectory() as tmp:
        with Ledger(str(Path(tmp) / "warm.db")) as led:  # fonts are registered once per process
            render_report(period_figures(led, "2026-10-01", "2026-10-02"))
        rows = [measure(n, Path(tmp)) for n in sizes]
    print(f"{'cases':>9} {'in period':>9} {'figures s':>9} {'report s':>9} {'peak MiB':>9} {'pdf KiB':>8}"
          f"  (ledger filled in)")
    for r in rows:
        print(f"{r['n']:>9,} {r['in_period']:>9,} {r['figures']:>9.2f} {r['total']:>9.2f} {r['peak_mb']:>9.1f} "
              f"{r['pdf_kb']:>8.0f}  ({r['fill']:.0f} s)")
    if len(rows) > 1:
        a, b = rows[0], rows[-1]
        print(f"cases x{b['n'] / a['n']:.0f}: time x{b['total'] / a['total']:.1f}, "
              f"peak memory x{b['peak_mb'] / a['peak_mb']:.1f} (Python allocations, tracemalloc)")
    print(f"goal: a {rows[-1]['n']:,}-case report in {GOAL_S:.0f} s or less: "
          f"{'met' if rows[-1]['total'] <= GOAL_S else 'not met'} ({rows[-1]['total']:.2f} s)")


if __name__ == "__main__":
    main()
