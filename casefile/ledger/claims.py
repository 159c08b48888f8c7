"""Claims on the inputs of a shared listing, so several workers (processes, machines) explain each input once.

Every worker enlists the same listing (one row per input, keyed by the input as listed, the model digest
and the settings digest), then takes a few open inputs at a time: on PostgreSQL with ``SELECT … FOR UPDATE
SKIP LOCKED`` (workers never wait on each other's rows), on SQLite under its one write lock. A claim is
renewed while its worker goes on and marked done when the input is recorded; a claim not renewed within
the timeout (its worker died) is taken over by another worker. The ledger itself never records an input
twice (its run key is unique), so a take-over of a worker that was only slow costs time, not a duplicate.
Times are the workers' own clocks (keep them in step, e.g. NTP); the timeout should be well above the
longest time one input takes.
"""

from __future__ import annotations

import hashlib
import os
import socket
import time
import uuid
from collections.abc import Sequence

from sqlalchemy import and_, func, or_, select, update

from casefile.ledger import tables as t
from casefile.ledger.store import Store

_c = t.claims.c


def worker_name() -> str:
    """This worker's name in the claims table: host, process id and a random part."""
    return f"{socket.gethostname()[:60]}:{os.getpid()}:{uuid.uuid4().hex[:8]}"


def claim_key(item: str, model_digest: str, settings_digest: str) -> str:
    return hashlib.sha256(f"{item}|{model_digest}|{settings_digest}".encode()).hexdigest()


class Claims:
    """One worker's view of the claims on ``items`` (the listing, in order) for one model and settings."""

    def __init__(self, store: Store, items: Sequence[str], model_digest: str, settings_digest: str, *,
                 worker: str | None = None, timeout: float = 600.0) -> None:
        self.store, self.timeout = store, timeout
        self.worker = worker or worker_name()
        self.keys = {item: claim_key(item, model_digest, settings_digest) for item in items}
        self.items = list(items)

    def _begin(self):
        return self.store.engine.connect().execution_options(write=True)

    def enlist(self) -> int:
        """Add the listing's inputs that are not in the table yet (every worker may do this; it is safe);
        return how many of them were done already (by an earlier run or another worker)."""
        with self._begin() as conn, conn.begin():
            have = {r[0] for r in conn.execute(select(_c.claim_key).where(_c.claim_key.in_(list(self.keys.values()))))}
            sql = self.store.sql("INSERT INTO claims (claim_key, position, input, done) VALUES (?, ?, ?, 0)")
            sql += " ON CONFLICT (claim_key) DO NOTHING" if self.store.flavour.name == "postgresql" else ""
            if self.store.flavour.name == "sqlite":
                sql = sql.replace("INSERT INTO", "INSERT OR IGNORE INTO", 1)
            for pos, item in enumerate(self.items):
                if self.keys[item] not in have:
                    conn.exec_driver_sql(sql, (self.keys[item], pos, item))
            return int(conn.execute(select(func.count()).select_from(t.claims).where(
                and_(_c.claim_key.in_(list(self.keys.values())), _c.done == 1))).scalar_one())

    def _open(self, now: float):
        mine = list(self.keys.values())
        return and_(_c.claim_key.in_(mine), _c.done == 0,
                    or_(_c.worker.is_(None), _c.claimed_at < now - self.timeout))

    def take(self, n: int = 1) -> list[str]:
        """Claim up to ``n`` open inputs (never claimed, or claimed by a worker silent for longer than the
        timeout), in listing order; [] when none is open right now."""
        now = time.time()
        with self._begin() as conn, conn.begin():
            q = select(_c.claim_key, _c.input).where(self._open(now)).order_by(_c.position).limit(n)
            if self.store.flavour.name == "postgresql":
                q = q.with_for_update(skip_locked=True)
            rows = conn.execute(q).all()
            if rows:
                conn.execute(update(t.claims).where(_c.claim_key.in_([r[0] for r in rows]))
                             .values(worker=self.worker, claimed_at=now))
        return [r[1] for r in rows]

    def renew(self) -> None:
        """Tell the others this worker is alive: its open claims start their timeout again."""
        with self._begin() as conn, conn.begin():
            conn.execute(update(t.claims).where(and_(_c.worker == self.worker, _c.done == 0))
                         .values(claimed_at=time.time()))

    def finish(self, item: str) -> None:
        """Mark one input done (recorded, skipped as recorded already, or recorded as failed)."""
        with self._begin() as conn, conn.begin():
            conn.execute(update(t.claims).where(_c.claim_key == self.keys[item]).values(done=1))

    def pending(self) -> int:
        """Inputs of the listing not done yet (claimed by someone or open)."""
        with self.store.engine.connect() as conn:
            return int(conn.execute(select(func.count()).select_from(t.claims).where(
                and_(_c.claim_key.in_(list(self.keys.values())), _c.done == 0))).scalar_one())
