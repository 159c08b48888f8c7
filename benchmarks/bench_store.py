"""Appends per second with 1, 2 and 4 concurrent writer processes, PostgreSQL vs SQLite, side by side.

Prints; asserts nothing. Both engines commit durably: SQLite with synchronous=FULL (WAL), PostgreSQL with
its defaults (fsync and synchronous_commit on), on a throwaway cluster (tests/ledger/pgserver.py) in a
temporary folder on the same disk. Each writer appends small amendment bodies, one transaction each.
Usage: benchmarks/bench_store.py [ENTRIES_PER_RUN]  (default 2,000, split among the writers).
"""

from __future__ import annotations

import multiprocessing as mp
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from casefile.ledger import Ledger  # noqa: E402
from tests.ledger import pgserver  # noqa: E402
from tests.ledger.bodies import amendment_body  # noqa: E402


def _writer(where: str, n: int, tag: str, barrier, out) -> None:
    led = Ledger(where)
    barrier.wait()
    t0 = time.perf_counter()
    for i in range(n):
        led.append("amendment", amendment_body(1, "a" * 64, f"{tag} {i}"))
    out.put((t0, time.perf_counter()))
    led.close()


def rate(where: str, writers: int, total: int) -> float:
    """Entries per second over the span from the first writer's start to the last one's end."""
    Ledger(where).close()
    ctx = mp.get_context("spawn")
    barrier, out = ctx.Barrier(writers), ctx.Queue()
    procs = [ctx.Process(target=_writer, args=(where, total // writers, f"w{k}", barrier, out))
             for k in range(writers)]
    for p in procs:
        p.start()
    spans = [out.get(timeout=600) for _ in procs]
    for p in procs:
        p.join()
    with Ledger(where, create=False) as led:
        assert led.count() == total // writers * writers and led.verify().ok  # a check of the run, not a goal
    return total // writers * writers / (max(e for _, e in spans) - min(s for s, _ in spans))


def main() -> None:
    total = int(sys.argv[1]) if len(sys.argv) > 1 else 2000
    results: dict[tuple[str, int], float] = {}
    with tempfile.TemporaryDirectory() as tmp, pgserver.cluster(durable=True) as pg:
        for writers in (1, 2, 4):
            results[("sqlite", writers)] = rate(str(Path(tmp) / f"w{writers}.db"), writers, total)
            results[("postgresql", writers)] = rate(pg.url(pg.new_database()), writers, total)
    print(f"appends/s, {total} entries per run, one transaction per entry, durable commits on both engines")
    print(f"{'writers':>8} {'SQLite':>10} {'PostgreSQL':>12} {'PG / SQLite':>12}")
    for writers in (1, 2, 4):
        s, p = results[("sqlite", writers)], results[("postgresql", writers)]
        print(f"{writers:>8} {s:>10.0f} {p:>12.0f} {p / s:>12.2f}")
    for engine in ("sqlite", "postgresql"):
        one = results[(engine, 1)]
        print(f"{engine}: 4 writers / 1 writer = {results[(engine, 4)] / one:.2f}")


if __name__ == "__main__":
    main()
