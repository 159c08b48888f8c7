"""Prints the time to replay one case against the time it took to explain and record it, side by side in
one run (goal: a replay costs at most 1.2 times the original explain), for a small model of our own on a
64 x 64 input and the demo's default methods. Run alone: the machine is small and shared.

    python benchmarks/bench_replay.py [REPEATS]     default 12 (at most 15)

Medians and minimums are both printed: on a shared machine the minimum says more about the cost itself.
"""

from __future__ import annotations

import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from PIL import Image
from tiny_model import write_tiny_model  # beside this file

from casefile.ledger import Ledger
from casefile.models import load_model
from casefile.pipeline import RunSettings, explain_one
from casefile.replay import replay_case, replay_loaded
from casefile.tolerances import Tolerances
from demo_cases.train import ENTRY_POINT

GOAL = 1.2
TRUSTED = (ENTRY_POINT,)


def _setup(d: Path) -> tuple[Path, Path, list[Path]]:
    write_tiny_model(d, "bench-replay", width=4, seed=1)
    rng = np.random.default_rng(2)
    inputs = []
    for i in range(32):  # two per repeat and one to warm up
        p = d / f"in_{i:02d}.png"
        Image.fromarray(rng.integers(0, 255, (64, 64), dtype=np.uint8)).save(p)
        inputs.append(p)
    return d / "net.pt", d / "card.json", inputs


def main() -> None:
    repeats = min(15, int(sys.argv[1]) if len(sys.argv) > 1 else 12)
    with tempfile.TemporaryDirectory() as tmp:
        weights, card, inputs = _setup(Path(tmp))
        led = Ledger(str(Path(tmp) / "b.db"), synchronous="NORMAL")
        loaded = load_model(weights, card, trusted_entry_points=TRUSTED)
        run = RunSettings(patch=8, stride=4)
        explain_one(led, inputs[-1], loaded, run)  # warm up torch and the ledger
        explained, whole_explain, compute, whole = [], [], [], []
        for path in inputs[:repeats]:
            t0 = time.perf_counter()
            out = explain_one(led, path, loaded, run)
            explained.append(time.perf_counter() - t0)
            t0 = time.perf_counter()
            again = load_model(weights, card, trusted_entry_points=TRUSTED)
            explain_one(led, inputs[repeats + len(whole_explain)], again, run)
            whole_explain.append(time.perf_counter() - t0)
            entry = led.case(out.case_id).entry
            t0 = time.perf_counter()
            r = replay_loaded(led, entry, loaded, path, Tolerances(), entry.body["input"]["file_sha256"])
            compute.append(time.perf_counter() - t0)
            t0 = time.perf_counter()
            r2 = replay_case(led, out.case_id, weights, card, path, trusted_entry_points=TRUSTED)
            whole.append(time.perf_counter() - t0)
            assert r.reproduces and r2.reproduces
        led.close()
    print(f"{repeats} cases (64 x 64 input, Grad-CAM + occlusion 8/4 + gradient, every check), median / minimum:")
    ratios = []
    for what, base, mine in (("model loaded", explained, compute),
                             ("with digests and model loading", whole_explain, whole)):
        med, low = statistics.median(mine) / statistics.median(base), min(mine) / min(base)
        ratios.append(low)
        print(f"  {what:<32} explain {statistics.median(base) * 1000:7.1f} / {min(base) * 1000:7.1f} ms   "
              f"replay {statistics.median(mine) * 1000:7.1f} / {min(mine) * 1000:7.1f} ms   "
              f"ratio {med:.2f} / {low:.2f}")
    print(f"goal: ratio <= {GOAL} (minimums): {'met' if max(ratios) <= GOAL else 'not met'}")

if __name__ == "__main__":
    main()
