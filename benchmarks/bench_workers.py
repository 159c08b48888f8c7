"""`explain --workers 2` throughput vs 1 worker, on an occlusion-heavy setting (the whole command path:
claims, worker processes with their own torch threads, one SQLite ledger).

Prints the ratios; asserts nothing. Goal (issue 13): at least 1.7x on this 2-core machine. A seeded
TinyNet (demo_cases.nets, width 8) on 64 x 64 grey pictures, occlusion patch 8, stride 2 (841 occluded
copies per input) plus Grad-CAM and gradient saliency. Usage: benchmarks/bench_workers.py [INPUTS]
(default 32).

The 1-worker run uses both cores through torch's threads, as `casefile explain` does. A third run, one
worker on one thread, shows how far the processes themselves scale. Two ratios: over the whole command (start-up included: each worker process imports torch and loads the
model before its first input), and the running rate, from the first recorded case to the last (a thread
polls the ledger), which is what a long run over an archive sees.
"""

from __future__ import annotations

import os
import sys
import tempfile
import threading
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import numpy as np  # noqa: E402
from PIL import Image  # noqa: E402
from tiny_model import write_tiny_model  # noqa: E402  (beside this file)

from casefile.ledger import Ledger  # noqa: E402
from casefile.models import load_model  # noqa: E402
from casefile.pipeline import RunSettings  # noqa: E402
from casefile.workers import explain_parallel  # noqa: E402
from demo_cases.train import ENTRY_POINT  # noqa: E402

RUN = RunSettings(patch=8, stride=2)


def scenario(d: Path, n: int) -> tuple[Path, Path, Path]:
    write_tiny_model(d, "bench-workers", width=8, seed=3)
    inputs = d / "inputs"
    inputs.mkdir()
    rng = np.random.default_rng(9)
    for i in range(n):
        Image.fromarray(rng.integers(0, 255, (64, 64), dtype=np.uint8)).save(inputs / f"part_{i:04d}.png")
    return d / "net.pt", d / "card.json", inputs


class Watch(threading.Thread):
    """Polls the ledger's case count; keeps the time each count was first seen."""

    def __init__(self, store: str) -> None:
        super().__init__(daemon=True)
        self.store, self.seen, self.stop = store, {}, threading.Event()

    def run(self) -> None:
        with Ledger(self.store, create=False) as led:
            while not self.stop.is_set():
                self.seen.setdefault(led.count("case"), time.perf_counter())
                time.sleep(0.05)


def seconds(d: Path, workers: int, model: Path, card: Path, inputs: Path,
            threads: int | None = None) -> tuple[float, float, float]:
    """(whole command, start-up until the first case, running seconds per input after the first case)"""
    store = str(d / f"w{workers}-{threads}.db")
    Ledger(store).close()
    loaded = load_model(model, card)
    watch = Watch(store)
    watch.start()
    t0 = time.perf_counter()
    summary = explain_parallel(store, [inputs], str(model), str(card), RUN, loaded=loaded, workers=workers,
                               threads=threads)
    took = time.perf_counter() - t0
    time.sleep(0.2)
    watch.stop.set()
    watch.join()
    n = len(list(inputs.iterdir()))
    assert summary.recorded == n and not summary.failed  # a check of the run
    first = min(t for k, t in watch.seen.items() if k >= 1)
    last = min(t for k, t in watch.seen.items() if k >= n)
    return took, first - t0, (last - first) / (n - 1)


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 32
    os.environ["CASEFILE_TRUSTED_ENTRY_POINTS"] = ENTRY_POINT
    with tempfile.TemporaryDirectory() as tmp:
        d = Path(tmp)
        model, card, inputs = scenario(d, n)
        one = seconds(d, 1, model, card, inputs)
        two = seconds(d, 2, model, card, inputs)
        single = seconds(d, 1, model, card, inputs, threads=1)
    print(f"{n} inputs, occlusion patch 8 stride 2 + Grad-CAM + gradient, 64 x 64, {os.cpu_count()} cores")
    rows = (("1 worker, 2 threads", one), ("2 workers, 1 thread each", two), ("1 worker, 1 thread", single))
    for name, (took, start, each) in rows:
        print(f"{name:25}: {took:6.1f} s in all ({n / took:.2f} inputs/s); first case after {start:4.1f} s, "
              f"then {1 / each:.2f} inputs/s")
    print(f"2 workers / 1 worker, whole command with start-up: {one[0] / two[0]:.2f}x")
    print(f"2 workers / 1 worker, running rate after the first case: {one[2] / two[2]:.2f}x (goal >= 1.7x)")
    print(f"for scale: 2 workers / 1 worker on one thread, running rate: {single[2] / two[2]:.2f}x; one worker's "
          f"second torch thread alone gives {single[2] / one[2]:.2f}x")

if __name__ == "__main__":
    main()
