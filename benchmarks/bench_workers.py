"""`explain --workers 2` throughput vs 1 worker, on an occlusion-heavy setting (the whole command path:
claims, worker processes with their own torch threads, one SQLite ledger).

Prints the ratio; asserts nothing. Goal (issue 13): at least 1.7x on this 2-core machine. A seeded
TinyNet (demo_cases.nets, width 8) on 64 x 64 grey pictures, occlusion patch 8, stride 2 (841 occluded
copies per input) plus Grad-CAM and gradient saliency. Usage: benchmarks/bench_workers.py [INPUTS]
(default 16).
"""

from __future__ import annotations

import os
import sys
import tempfile
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


def seconds(d: Path, workers: int, model: Path, card: Path, inputs: Path) -> float:
    store = str(d / f"w{workers}.db")
    Ledger(store).close()
    loaded = load_model(model, card)
    t0 = time.perf_counter()
    summary = explain_parallel(store, [inputs], str(model), str(card), RUN, loaded=loaded, workers=workers)
    took = time.perf_counter() - t0
    assert summary.recorded == len(list(inputs.iterdir())) and not summary.failed  # a check of the run
    return took


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 16
    os.environ["CASEFILE_TRUSTED_ENTRY_POINTS"] = ENTRY_POINT
    with tempfile.TemporaryDirectory() as tmp:
        d = Path(tmp)
        model, card, inputs = scenario(d, n)
        one = seconds(d, 1, model, card, inputs)
        two = seconds(d, 2, model, card, inputs)
    print(f"{n} inputs, occlusion patch 8 stride 2 + Grad-CAM + gradient, 64 x 64, {os.cpu_count()} cores")
    print(f"1 worker : {one:6.1f} s  ({n / one:.2f} inputs/s)")
    print(f"2 workers: {two:6.1f} s  ({n / two:.2f} inputs/s)")
    print(f"2 workers / 1 worker throughput: {one / two:.2f}x (goal >= 1.7x)")


if __name__ == "__main__":
    main()
