"""Parallel explain: workers that take the inputs of one shared listing through claims in the ledger's
database, on one machine (``explain --workers N``: processes, each with its own torch threads) or on
several machines running `casefile explain --workers N` against the same PostgreSQL ledger.

Each input is explained once: a worker claims a few inputs at a time, renews its claims while it works,
and marks each done; a claim left by a worker that died is taken over after the timeout. The ledger's
unique run key keeps an input from ever being recorded twice, even when a slow worker's claim is taken
over.
"""

from __future__ import annotations

import multiprocessing as mp
import os
import queue
import time
from collections.abc import Callable, Sequence
from typing import Any

from casefile.errors import UsageError
from casefile.ledger import Claims, Ledger
from casefile.pipeline import (
    BatchSummary,
    Outcome,
    RunSettings,
    check_inputs,
    explain_one,
    iter_inputs,
    preflight,
)
from casefile.record import settings_digest

DEFAULT_CLAIM_TIMEOUT = 600.0  # seconds without a renewal before another worker takes an input over
CLAIM_BATCH = 2  # inputs a worker claims at a time


def explain_claimed(ledger: Ledger, inputs: Sequence[str | os.PathLike[str]], loaded: Any,
                    run: RunSettings | None = None, *, key: str | None = None, sheet_dir: str | None = None,
                    worker: str | None = None, timeout: float = DEFAULT_CLAIM_TIMEOUT, batch: int = CLAIM_BATCH,
                    on_outcome: Callable[[Outcome], None] | None = None, poll: float = 1.0) -> BatchSummary:
    """One worker: enlist the listing, then explain what it claims until every input is done (waiting,
    while others hold claims, to take over any that time out)."""
    run = (run or RunSettings()).with_limits()
    settings = preflight(loaded, run)
    check_inputs(inputs)
    claims = Claims(ledger, [str(p) for p in iter_inputs(inputs)], loaded.digest, settings_digest(settings),
                    worker=worker, timeout=timeout)
    summary = BatchSummary()
    summary.skipped = claims.enlist()  # done by an earlier run (or another worker): not looked at again
    while True:
        got = claims.take(batch)
        if not got:
            if claims.pending() == 0:
                return summary
            time.sleep(min(poll, timeout / 4))
            continue
        for path in got:
            out = explain_one(ledger, path, loaded, run, key=key, sheet_dir=sheet_dir, settings=settings)
            claims.finish(path)
            claims.renew()
            summary.add(out)
            if on_outcome:
                on_outcome(out)


def _child(store: str, inputs: list[str], model: str, card: str, run: RunSettings, key: str | None,
           sheet_dir: str | None, timeout: float, threads: int, out: Any) -> None:
    import torch

    from casefile.models import load_model

    torch.set_num_threads(threads)
    loaded = load_model(model, card)
    with Ledger(store, create=False) as led:
        explain_claimed(led, inputs, loaded, run, key=key, sheet_dir=sheet_dir, timeout=timeout, on_outcome=out.put)
    out.put(None)


def explain_parallel(store: str, inputs: Sequence[str | os.PathLike[str]], model: str, card: str,
                     run: RunSettings | None = None, *, loaded: Any, workers: int, key: str | None = None,
                     sheet_dir: str | None = None, timeout: float = DEFAULT_CLAIM_TIMEOUT,
                     on_outcome: Callable[[Outcome], None] | None = None,
                     threads: int | None = None) -> BatchSummary:
    """``workers`` processes on this machine, each with an equal share of its cores as torch threads (or
    ``threads`` each), each loading ``model`` with ``card`` itself. The caller has made every refusal for
    the run (preflight, inputs) with ``loaded`` (the same model, loaded once) and opened the ledger once.
    Inputs of the listing done by an earlier run are counted as skipped and not looked at again."""
    ctx = mp.get_context("spawn")
    out = ctx.Queue()
    if threads is None:
        threads = max(1, (os.cpu_count() or 1) // workers)
    elif isinstance(threads, bool) or not isinstance(threads, int) or threads < 1:
        raise UsageError(f"threads per worker must be a whole number of at least 1 (got {threads!r})")
    run = (run or RunSettings()).with_limits()
    summary = BatchSummary()
    settings = preflight(loaded, run)
    files = [str(p) for p in iter_inputs(inputs)]
    with Ledger(store, create=False) as led:  # the listing enlisted once here; done earlier: counted as skipped
        summary.skipped = Claims(led, files, loaded.digest, settings_digest(settings)).enlist()
    if summary.skipped == len(files):
        return summary  # nothing left to do: no worker is started
    procs = [ctx.Process(target=_child, args=(store, [str(p) for p in inputs], model, card, run, key, sheet_dir,
                                               timeout, threads, out)) for _ in range(workers)]
    for p in procs:
        p.start()
    finished = 0
    try:
        while finished < workers:
            try:
                item = out.get(timeout=1.0)
            except queue.Empty:
                if all(not p.is_alive() for p in procs) and out.empty():
                    break
                continue
            if item is None:
                finished += 1
                continue
            summary.add(item)
            if on_outcome:
                on_outcome(item)
    except KeyboardInterrupt:
        summary.interrupted = True
        for p in procs:
            p.terminate()
    for i, p in enumerate(procs, 1):
        p.join()
        if p.exitcode not in (0, None) and not summary.interrupted:
            summary.failed.append((f"worker {i}", f"the worker process stopped with exit code {p.exitcode}; "
                                                 "re-run the same command to finish"))
    return summary
