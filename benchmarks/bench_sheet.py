"""Prints seconds per case sheet over a batch of 200 and whether memory stays flat across the batch."""

from __future__ import annotations

import importlib.util
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import psutil

from casefile.sheet import render_many, render_sheet

GOAL_S = 0.2
N = 200


def _fixtures():
    path = Path(__file__).resolve().parent.parent / "tests" / "sheet" / "fixtures.py"
    spec = importlib.util.spec_from_file_location("bench_sheet_fixtures", path)
    mod = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = mod
    spec.loader.exec_module(mod)
    return mod


def main() -> None:
    fx = _fixtures()
    proc = psutil.Process()
    # warm up: fonts are registered and parsed once per process
    case, blobs = fx.build_case()
    render_sheet(case, blob=fx.BlobStore(blobs), reviews=fx.reviews(2), as_of_seq=1, entry_hash=fx.ENTRY_HASH)

    rss: list[float] = []

    def items():
        for i in range(N):
            case, blobs = fx.build_case(case_id=f"b-{i:06d}", n_maps=1 + i % 3)
            yield {"case": case, "blob": fx.BlobStore(blobs), "reviews": fx.reviews(i % 4),
                   "as_of_seq": 1000 + i, "entry_hash": fx.ENTRY_HASH}

    def note(_cid, _path):
        if len(rss) % 50 == 0 or len(rss) == N - 1:
            rss.append(proc.memory_info().rss / 2**20)
        else:
            rss.append(rss[-1])

    with tempfile.TemporaryDirectory() as out:
        start = time.perf_counter()
        render_many(items(), out, on_done=note)
        batch = time.perf_counter() - start
    per = batch / N
    marks = [rss[i] for i in (0, 50, 100, 150, N - 1)]
    print(f"sheets: {N}, seconds per sheet {per:.3f} (goal {GOAL_S}; ratio to goal {per / GOAL_S:.2f})")
    print("RSS MiB after sheet 1, 51, 101, 151, 200: " + ", ".join(f"{m:.1f}" for m in marks)
          + f"; growth from 51 to 200: {marks[-1] - marks[1]:+.1f} MiB")

    tracemalloc.start()
    peaks = []
    for i in range(20):
        case, blobs = fx.build_case(case_id=f"t-{i:06d}")
        tracemalloc.reset_peak()
        render_sheet(case, blob=fx.BlobStore(blobs), reviews=fx.reviews(2), as_of_seq=1, entry_hash=fx.ENTRY_HASH)
        peaks.append(tracemalloc.get_traced_memory()[1] / 2**20)
    tracemalloc.stop()
    print(f"Python heap peak per sheet (tracemalloc), first vs last of 20: {peaks[0]:.1f} vs {peaks[-1]:.1f} MiB "
          f"(ratio {peaks[-1] / peaks[0]:.2f})")

    case, blobs = fx.build_case()
    def one(**kw):
        t = time.perf_counter()
        render_sheet(kw.pop("case"), blob=fx.BlobStore(kw.pop("blobs")), reviews=[], as_of_seq=1,
                     entry_hash=fx.ENTRY_HASH)
        return time.perf_counter() - t
    bare, _ = fx.build_case(n_maps=0)
    t_full = min(one(case=case, blobs=blobs) for _ in range(5))
    t_bare = min(one(case=bare, blobs=blobs) for _ in range(5))
    print(f"three maps vs no map: {t_full:.3f} s vs {t_bare:.3f} s (ratio {t_full / t_bare:.2f})")


if __name__ == "__main__":
    main()
