"""Occlusion methods side by side in one run, printed as ratios (nothing asserted).

For each setting: the naive loop (one forward pass per position; timed on a sample and scaled), the
plain batched method, exact incremental occlusion, and the two approximate modes. Beside the exact
result, the theoretical limit: full forward passes' multiply-adds over those the patches' projective
fields require (``casefile.explain.incremental.projective_macs``). For the approximate modes, Spearman's
rank correlation (scipy.stats.spearmanr) of the map against the exact one and the IoU of their top-5 %
pixels. Peak memory of each mode: the growth of the peak resident set of a process of its own running
it (from just before the call to its end).

At 224 px each mode runs three times in a process of its own and the faster of the two warm runs is
kept (as every case after a batch's first runs); at 512 px it runs once. Peak memory includes the first
run. Run: ``python benchmarks/occlusion.py`` (about 10 minutes on two cores; ``--quick`` runs 224 px only,
``--large`` the 512 px setting only).
"""

from __future__ import annotations

import contextlib
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import torch
from scipy.stats import spearmanr

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_explain import ResNet18Shape  # noqa: E402

from casefile.explain.incremental import projective_macs, trace  # noqa: E402
from casefile.explain.occlusion import occlusion, positions  # noqa: E402

MODES = ("batched", "incremental", "truncated", "coarse-to-fine")
# the plain method with the whole images in PyTorch's default memory order, as it ran before it took
# channels-last (casefile.explain._common.channels_last): the baseline the goals were first set against
DEFAULT_ORDER = "batched-default-order"
# Up to this size each mode is timed on its second run in its process, as every case after a batch's
# first runs: the first run also traces the model and builds the convolution kernels for each new
# window shape (about 0.7 s at 224 px). At 512 px that is under 3 % of a run, and a second run of the
# plain method would cost minutes, so the first run is timed.
WARM_UP_UP_TO = 256
WARM_REPEATS = 2  # warm runs timed, the fastest kept (this shared machine's timings move 15-25 %)
SAMPLE = 12


def _rss_kib() -> int:
    with open("/proc/self/statm") as f:
        return int(f.read().split()[1]) * os.sysconf("SC_PAGE_SIZE") // 1024


def _one(size: int, patch: int, stride: int, mode: str, out: str) -> None:
    """Run one mode in this process and write its seconds, peak memory growth and map to ``out``."""
    net = _net(0)
    x = _input(size)
    if mode == DEFAULT_ORDER:
        sys.modules["casefile.explain.occlusion"].channels_last = _as_given
        mode = "batched"
    before = _rss_kib()
    runs = 1 + WARM_REPEATS if size <= WARM_UP_UP_TO else 1
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        r = occlusion(net, x, 0, patch=patch, stride=stride, mode=mode, return_all=True)
        times.append(time.perf_counter() - t0)
    dt = min(times[1:] or times)  # warm runs: the fastest of them; otherwise the one run
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # KiB on Linux: the first run's allocations too
    np.save(out + ".npy", r.probability)
    Path(out + ".json").write_text(json.dumps({"seconds": dt, "mode": r.mode, "kib": max(0, peak - before)}))


@contextlib.contextmanager
def _as_given(module: torch.nn.Module, x: torch.Tensor) -> Iterator[tuple[torch.Tensor, object]]:
    yield x, module(x)


def _run(size: int, patch: int, stride: int, mode: str) -> tuple[float, np.ndarray, str, int]:
    with tempfile.TemporaryDirectory() as tmp:
        out = str(Path(tmp) / "r")
        subprocess.run([sys.executable, __file__, "--one", str(size), str(patch), str(stride), mode, out],
                       check=True)
        meta = json.loads(Path(out + ".json").read_text())
        return meta["seconds"], np.load(out + ".npy"), meta["mode"], meta["kib"]


def _input(size: int) -> torch.Tensor:
    return torch.randn(1, 3, size, size, generator=torch.Generator().manual_seed(1))


def _net(seed: int) -> torch.nn.Module:
    torch.manual_seed(seed)
    net = ResNet18Shape().eval()
    for m in net.modules():  # running statistics away from 0 / 1, as a trained model has
        if isinstance(m, torch.nn.BatchNorm2d):
            m.running_mean.uniform_(-0.2, 0.2)
            m.running_var.uniform_(0.5, 1.5)
    return net


def naive_seconds(net: torch.nn.Module, x: torch.Tensor, patch: int, stride: int) -> float:
    starts_r, starts_c = positions(x.shape[2], patch, stride), positions(x.shape[3], patch, stride)
    spots = [(r, c) for r in starts_r for c in starts_c]
    sample = spots[:: max(1, len(spots) // SAMPLE)][:SAMPLE]
    t0 = time.perf_counter()
    with torch.no_grad():
        for r, c in sample:
            xo = x.clone()
            xo[:, :, r : r + patch, c : c + patch] = 0.0
            net(xo)
    return (time.perf_counter() - t0) * len(spots) / len(sample)


def top_iou(a: np.ndarray, b: np.ndarray, share: float = 0.05) -> float:
    k = max(1, int(share * a.size))
    ta = set(np.argsort(a.ravel())[-k:].tolist())
    tb = set(np.argsort(b.ravel())[-k:].tolist())
    return len(ta & tb) / len(ta | tb)


def bench(size: int, patch: int, stride: int) -> None:
    net = _net(0)
    x = _input(size)
    n = len(positions(size, patch, stride)) ** 2
    plan = trace(net, x)
    boxes = [(r, c, patch, patch) for r in positions(size, patch, stride) for c in positions(size, patch, stride)]
    limit = n * plan.macs_full / projective_macs(plan, boxes)
    cache = sum(v.numel() * v.element_size() for v in plan.base.values() if isinstance(v, torch.Tensor))
    print(f"\nResNet-18 shape, {size} x {size}, patch {patch}, stride {stride}: {n} positions, "
          f"{plan.macs_full / 1e9:.2f} GMAC per forward pass; cached run {cache / 2**20:.0f} MiB "
          f"(every layer's output for the one clean image, weights included)")
    t_naive = naive_seconds(net, x, patch, stride)
    results = {mode: _run(size, patch, stride, mode) for mode in (*MODES, DEFAULT_ORDER)}
    t_batch, t_before = results["batched"][0], results[DEFAULT_ORDER][0]
    exact = results["incremental"][1]
    print(f"  {'method':<34}{'seconds':>9}{'vs batched':>12}{'peak MiB':>10}")
    print(f"  {'naive loop (sampled, scaled)':<34}{t_naive:9.2f}{t_batch / t_naive:11.2f}x{'':>10}")
    print(f"  {'plain batched, default order':<34}{t_before:9.2f}{t_batch / t_before:11.2f}x"
          f"{results[DEFAULT_ORDER][3] / 1024:10.0f}   (before channels-last)")
    for mode in MODES:
        dt, m, used, mem = results[mode]
        label = {"batched": "plain batched (baseline)", "incremental": "incremental, exact",
                 "truncated": "truncated (fidelity 0.5), approx.",
                 "coarse-to-fine": "coarse-to-fine (0.25), approx."}[mode]
        line = f"  {label:<34}{dt:9.2f}{t_batch / dt:11.2f}x{mem / 1024:10.0f}"
        if mode == "incremental":
            line += (f"   limit {limit:.2f}x from multiply-adds; {t_batch / dt / limit:.0%} of it"
                     f"{'' if used == mode else ' (FELL BACK: ' + used + ')'}")
            err = float(np.abs(m - results["batched"][1]).max())
            line += f"; max |diff| to batched {err:.1e}; {t_before / dt:.2f}x the default-order plain method"
        elif mode != "batched":
            rho = spearmanr(m.ravel(), exact.ravel())[0]
            line += f"   Spearman {rho:.3f}, top-5 % IoU {top_iou(m, exact):.2f}"
        print(line)


def trained(cases: int = 12) -> None:
    """Approximation quality where maps mean something: the demo's trained model on scenario pictures."""
    from demo_cases.nets import tiny_net
    from demo_cases.scenario import make_set
    from demo_cases.train import train

    with tempfile.TemporaryDirectory() as tmp:
        paths = train(7, shortcut=False, out_dir=tmp, torchscript=False)
        card = json.loads(paths["card"].read_text())
        net = tiny_net()
        net.load_state_dict(torch.load(paths["weights"], weights_only=True))
    net.eval()
    mean, std = card["normalisation"]["mean"][0], card["normalisation"]["std"][0]
    xs = (torch.from_numpy(make_set(99, cases).as_float()) - mean) / std
    patch, stride = 9, 4
    print(f"\ntrained demo model (casting-honest), 64 x 64, patch {patch}, stride {stride}, {cases} scenario pictures")
    seconds = {m: 0.0 for m in MODES}
    rho = {m: [] for m in ("truncated", "coarse-to-fine")}
    iou = {m: [] for m in ("truncated", "coarse-to-fine")}
    for x in xs:
        x = x[None]
        maps = {}
        for mode in MODES:
            t0 = time.perf_counter()
            maps[mode] = occlusion(net, x, None, patch=patch, stride=stride, mode=mode)
            seconds[mode] += time.perf_counter() - t0
        for mode in rho:
            rho[mode].append(spearmanr(maps[mode].ravel(), maps["incremental"].ravel())[0])
            iou[mode].append(top_iou(maps[mode], maps["incremental"]))
    for mode in MODES:
        line = f"  {mode:<16}{seconds[mode]:8.2f} s{seconds['batched'] / seconds[mode]:8.2f}x"
        if mode in rho:
            line += (f"   Spearman median {np.median(rho[mode]):.3f} (lowest {min(rho[mode]):.3f}), "
                     f"top-5 % IoU median {np.median(iou[mode]):.2f} (lowest {min(iou[mode]):.2f})")
        print(line)


def main() -> None:
    if sys.argv[1:2] == ["--one"]:
        size, patch, stride = (int(v) for v in sys.argv[2:5])
        _one(size, patch, stride, sys.argv[5], sys.argv[6])
        return
    print(f"torch {torch.__version__}, {torch.get_num_threads()} threads, {os.cpu_count()} CPUs")
    if "--large" not in sys.argv:
        trained()
        bench(224, 32, 16)
        bench(224, 16, 8)
    if "--quick" not in sys.argv:
        bench(512, 32, 16)


if __name__ == "__main__":
    main()
