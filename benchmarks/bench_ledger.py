"""Ledger speed: appends per second vs bare SQLAlchemy inserts, and verify time and memory at 100,000 entries.

Prints ratios measured side by side in one run; asserts nothing. Goals (issue 2): at least 1,000
appends/s, at most 1.5x the bare inserts, verify of 100,000 entries in at most 10 s with flat memory.
"""

from __future__ import annotations

import json
import os
import resource
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from sqlalchemy import Column, Integer, MetaData, String, Table, Text, create_engine, event, insert  # noqa: E402

from casefile.ledger import Ledger  # noqa: E402
from tests.ledger.bodies import case_body  # noqa: E402


def bare_engine(path: str, sync: str):
    engine = create_engine("sqlite:///" + path, connect_args={"timeout": 60})

    @event.listens_for(engine, "connect")
    def _c(dbapi, _):
        dbapi.isolation_level = None
        dbapi.execute("PRAGMA journal_mode=WAL")
        dbapi.execute(f"PRAGMA synchronous={sync}")

    @event.listens_for(engine, "begin")
    def _b(conn):
        conn.exec_driver_sql("BEGIN IMMEDIATE")

    md = MetaData()
    tb = Table("entries", md, Column("seq", Integer, primary_key=True), Column("kind", String(32)),
               Column("body", Text), Column("prev_hash", String(64)), Column("hash", String(64)))
    md.create_all(engine)
    return engine, tb


def bare_same_rows(path: str, sync: str, bodies: list[dict]) -> float:
    """The ledger's own rows (entry + case query row) with plain SQLAlchemy Core: no canonical JSON, no
    schema check, no hashing, no triggers. Returns seconds for one transaction per entry."""
    from casefile.ledger import tables as t
    from casefile.ledger.derive import derive

    engine, _ = bare_engine(path, sync)
    t.metadata.create_all(engine)
    rows = [(i, json.dumps(b), derive(i, "case", b, [])) for i, b in enumerate(bodies, 1)]
    by_name = {tb.name: insert(tb) for tb in t.DERIVED_TABLES}
    entry_stmt = insert(t.entries)
    t0 = time.perf_counter()
    for i, body, derived in rows:
        with engine.begin() as conn:
            conn.execute(entry_stmt, {"seq": i, "kind": "case", "body": body, "prev_hash": "", "hash": str(i)})
            for name, row in derived:
                conn.execute(by_name[name], row)
    return time.perf_counter() - t0


def main(n_append: int = 10_000, n_verify: int = 100_000) -> None:
    tmp = tempfile.mkdtemp()
    bodies = [case_body(i) for i in range(n_append)]

    for sync in ("FULL", "NORMAL"):
        engine, tb = bare_engine(os.path.join(tmp, f"bare-{sync}.db"), sync)
        t0 = time.perf_counter()
        stmt = insert(tb)
        for i, b in enumerate(bodies, 1):
            with engine.begin() as conn:
                conn.execute(stmt, {"seq": i, "kind": "case", "body": json.dumps(b), "prev_hash": "", "hash": str(i)})
        bare = time.perf_counter() - t0
        same = bare_same_rows(os.path.join(tmp, f"same-{sync}.db"), sync, bodies)
        led = Ledger(os.path.join(tmp, f"ledger-{sync}.db"), synchronous=sync)
        t0 = time.perf_counter()
        for b in bodies:
            led.append("case", b)
        ours = time.perf_counter() - t0
        print(f"append {n_append} case bodies, one transaction each (WAL, synchronous={sync}):")
        print(f"  casefile ledger : {n_append / ours:8.0f} entries/s   (goal >= 1000/s)")
        print(f"  bare SQLAlchemy : {n_append / bare:8.0f} rows/s (no hashing, no schema, no query tables)")
        print(f"  bare, same rows : {n_append / same:8.0f} entries/s (entry + query row, no hashing/schema/triggers)")
        print(f"  ratio ledger/bare time: {ours / bare:.2f} vs one bare row; {ours / same:.2f} vs the same rows "
              "(goal <= 1.5)")
    led = Ledger(os.path.join(tmp, "ledger-batch.db"))
    t0 = time.perf_counter()
    for j in range(0, n_append, 100):
        led.append_many([("case", b, None) for b in bodies[j:j + 100]])
    print(f"append in transactions of 100 (FULL): {n_append / (time.perf_counter() - t0):8.0f} entries/s")

    big = Ledger(os.path.join(tmp, "big.db"))
    batch = []
    for i in range(n_verify):
        batch.append(("case", case_body(i), None))
        if len(batch) == 5000:
            big.append_many(batch)
            batch = []
    if batch:
        big.append_many(batch)
    for size in (n_verify // 10, n_verify):
        small = Ledger(os.path.join(tmp, f"v{size}.db"))
        if size != n_verify:
            rows = [("case", case_body(i), None) for i in range(size)]
            for j in range(0, size, 5000):
                small.append_many(rows[j:j + 5000])
        else:
            small = big
        t0 = time.perf_counter()
        report = small.verify()
        dt = time.perf_counter() - t0
        tracemalloc.start()  # a second pass for memory: tracing slows Python down several times
        small.verify()
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        print(f"verify {size:>7} entries: {dt:6.2f} s, ok={report.ok}, peak Python memory {peak / 2**20:6.1f} MiB")
    print(f"  (goal: <= 10 s at {n_verify}; peak memory about the same at both sizes)")
    print(f"process max RSS {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MiB")


if __name__ == "__main__":
    main()
