"""Occlusion sensitivity (Zeiler & Fergus 2014): the drop in the class score when a patch is covered."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import torch
import torch.nn.functional as F
from torch import nn

from casefile.errors import ExplainError, one_line

from ._common import (
    batched_logits,
    channels_last,
    check_input,
    check_logits,
    model_left_as_found,
    pick_target,
    to_map,
)
from .incremental import NotTraceable, Plan, Runner, trace

OUTPUTS = ("probability", "logit")
MODES = ("auto", "incremental", "batched", "truncated", "coarse-to-fine")
EXACT_MODES = ("auto", "incremental", "batched")
# "auto" computes incrementally only for a model of at least this many multiply-adds per image: below it,
# windows of a few pixels run slower per value than whole maps and the plain method is as fast or faster
# (measured: benchmarks/occlusion.py, the demo's 5-million model against a ResNet-18 shape)
AUTO_MIN_MACS = 100_000_000
PIXELS_PER_BATCH = 8 * 224 * 224  # the plain method's batches hold at most this many pixels per channel
DEFAULT_FIDELITY = {"truncated": 0.5, "coarse-to-fine": 0.25}


@dataclass
class OcclusionResult:
    """Both maps (image size) and the per-position drops (grid) of one occlusion run."""

    probability: np.ndarray
    logit: np.ndarray
    grid_probability: np.ndarray
    grid_logit: np.ndarray
    rows: list[int] = field(default_factory=list)
    cols: list[int] = field(default_factory=list)
    patch: tuple[int, int] = (0, 0)
    stride: int = 0
    target: int = 0
    batch_size: int = 0
    mode: str = "batched"
    exact: bool = True
    fidelity: float = 1.0
    summary: str = ""
    notes: list[str] = field(default_factory=list)
    work_share: float | None = None  # multiply-adds computed over those of one forward pass per position


def positions(size: int, patch: int, stride: int) -> list[int]:
    """Start offsets along one axis; a last start flush with the border is added so every pixel is covered."""
    starts = list(range(0, size - patch + 1, stride))
    if starts[-1] + patch < size:
        starts.append(size - patch)
    return starts


def gaussian_blur(x: torch.Tensor, sigma: float) -> torch.Tensor:
    """Separable Gaussian blur of [N, C, H, W] per channel (edges replicated), radius 3 sigma."""
    if sigma <= 0:
        return x.clone()
    radius = max(1, int(math.ceil(3.0 * sigma)))
    offs = torch.arange(-radius, radius + 1, dtype=x.dtype, device=x.device)
    kern = torch.exp(-0.5 * (offs / sigma) ** 2)
    kern = kern / kern.sum()
    c = x.shape[1]
    kh = kern.view(1, 1, 1, -1).repeat(c, 1, 1, 1)
    kv = kern.view(1, 1, -1, 1).repeat(c, 1, 1, 1)
    y = F.pad(x, (radius, radius, 0, 0), mode="replicate")
    y = F.conv2d(y, kh, groups=c)
    y = F.pad(y, (0, 0, radius, radius), mode="replicate")
    return F.conv2d(y, kv, groups=c)


def fill_image(
    x: torch.Tensor, fill: float | str, *, blur_sigma: float | None = None, patch: int = 32
) -> torch.Tensor:
    """The picture that replaces covered pixels: a constant, the per-channel mean, or a blurred copy.

    ``blur_sigma`` defaults to patch / 4, so detail the size of the patch is removed (common practice).
    """
    if isinstance(fill, str):
        if fill == "mean":
            return x.mean(dim=(2, 3), keepdim=True).expand_as(x).clone()
        if fill == "blur":
            sigma = float(blur_sigma) if blur_sigma is not None else max(1.0, patch / 4.0)
            with torch.no_grad():
                return gaussian_blur(x, sigma)
        raise ExplainError(f"occlusion fill: {fill!r} is not a number, 'mean' or 'blur'")
    if isinstance(fill, bool) or not isinstance(fill, (int, float)) or not math.isfinite(float(fill)):
        raise ExplainError(f"occlusion fill: {fill!r} is not a finite number, 'mean' or 'blur'")
    return torch.full_like(x, float(fill))


def check_mode(mode: object, fidelity: object, where: str = "") -> float:
    """The fidelity to use for ``mode`` (its default when None); a one-line ExplainError for either
    being wrong. Exact modes take no fidelity."""
    if mode not in MODES:
        raise ExplainError(f"{where}occlusion mode: {mode!r} is not one of {', '.join(MODES)}")
    if fidelity is None:
        return DEFAULT_FIDELITY.get(str(mode), 1.0)
    if mode in EXACT_MODES:
        raise ExplainError(f"{where}occlusion fidelity: {mode} is exact and takes no fidelity (give none)")
    if isinstance(fidelity, bool) or not isinstance(fidelity, (int, float)) or not 0 < float(fidelity) <= 1:
        raise ExplainError(f"{where}occlusion fidelity: {fidelity!r} is not a number above 0 and at most 1")
    return float(fidelity)


def _check_int(name: str, value: object) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or int(value) < 1:
        raise ExplainError(f"occlusion {name}: expected a positive whole number, got {value!r}")
    return int(value)


def occlusion(
    module: nn.Module,
    x: torch.Tensor,
    target: int | None = None,
    *,
    patch: int = 32,
    stride: int = 16,
    fill: float | str = 0.0,
    batch_size: int = 64,
    output: str = "probability",
    blur_sigma: float | None = None,
    return_all: bool = False,
    mode: str = "auto",
    fidelity: float | None = None,
) -> np.ndarray | OcclusionResult:
    """Occlusion map float32 [H, W]: the drop in the class probability (or logit) when a patch is filled.

    A patch larger than the image is clipped to the image. Overlapping patches are averaged per pixel.
    With ``return_all=True`` returns an :class:`OcclusionResult` holding both the probability-drop and
    the logit-drop maps and the per-position grids.

    ``mode``: "incremental" (exact: each covered image computed as a change to one cached run, see
    ``incremental``; a model that cannot be traced uses "batched", and the result's notes say so),
    "auto" (the default: "incremental" for a model of at least ``AUTO_MIN_MACS`` multiply-adds per image,
    else "batched", and the notes say why),
    "batched" (exact: one forward per position, in batches), and two approximate modes whose
    ``fidelity`` (0 < f <= 1) sets how much is computed: "truncated" keeps that share of each layer's map
    around the patch's changed window, "coarse-to-fine" computes every position of twice the stride and
    that share of the remaining positions, the ones the coarse map ranks highest; the rest are
    interpolated from the coarse map.
    """
    x = check_input(x)
    patch = _check_int("patch", patch)
    stride = _check_int("stride", stride)
    batch_size = _check_int("batch_size", batch_size)
    fidelity = check_mode(mode, fidelity)
    if output not in OUTPUTS:
        raise ExplainError(f"occlusion output: {output!r} is not one of {', '.join(OUTPUTS)}")
    _, _, h, w = x.shape
    ph, pw = min(patch, h), min(patch, w)
    if (stride > ph and h > ph) or (stride > pw and w > pw):
        raise ExplainError(
            f"occlusion stride: {stride} is larger than the patch ({patch}); pixels between patches would be left out"
        )
    rows, cols = positions(h, ph, stride), positions(w, pw, stride)
    spots = [(r, c) for r in rows for c in cols]
    with model_left_as_found(module), torch.no_grad(), channels_last(module, x) as (x_run, out):
        nhwc, x = x_run is not x, x_run
        base_logits = check_logits(out)
        t = pick_target(base_logits, target)
        z0 = base_logits[0, t]
        p0 = torch.softmax(base_logits[0], dim=0)[t]
        filler = fill_image(x, fill, blur_sigma=blur_sigma, patch=ph)
        drops = Drops(module, x, filler, (ph, pw), t, z0, p0, batch_size, nhwc)
        summary = ""
        if mode == "coarse-to-fine":
            drops_z, drops_p, summary = _coarse_to_fine(drops, rows, cols, stride, fidelity, h, w)
        else:
            drops_z, drops_p = drops(spots, "incremental" if mode == "truncated" else mode,
                                     fidelity if mode == "truncated" else 1.0)
            if mode == "truncated":
                summary = f"each layer's changed window cut to {fidelity:.0%} of its map about its centre"
        used = drops.plain_batch if drops.plain_batch is not None else drops.used
    maps = {}
    for name, values in (("logit", drops_z), ("probability", drops_p)):
        total = torch.zeros((h, w), dtype=torch.float64)
        count = torch.zeros((h, w), dtype=torch.float64)
        for (r, c), d in zip(spots, values, strict=True):
            total[r : r + ph, c : c + pw] += d
            count[r : r + ph, c : c + pw] += 1.0
        maps[name] = to_map(total / count)
    if not return_all:
        return maps[output]
    shape = (len(rows), len(cols))
    used_mode = mode
    if mode in ("auto", "incremental", "truncated"):
        used_mode = "batched" if drops.fell_back is not None else ("incremental" if mode == "auto" else mode)
    return OcclusionResult(
        probability=maps["probability"],
        logit=maps["logit"],
        grid_probability=drops_p.numpy().reshape(shape).astype(np.float32),
        grid_logit=drops_z.numpy().reshape(shape).astype(np.float32),
        rows=rows,
        cols=cols,
        patch=(ph, pw),
        stride=stride,
        target=t,
        batch_size=used,
        mode=used_mode,
        exact=used_mode != "truncated" and mode != "coarse-to-fine",
        fidelity=fidelity,
        summary=summary,
        notes=drops.notes(),
        work_share=drops.work_share(),
    )


class Drops:
    """Drops of the target's logit and probability for lists of patch positions, by one method."""

    def __init__(self, module: nn.Module, x: torch.Tensor, filler: torch.Tensor, patch: tuple[int, int],
                 target: int, z0: torch.Tensor, p0: torch.Tensor, batch_size: int, nhwc: bool = False) -> None:
        self.module, self.x, self.filler, self.patch = module, x, filler, patch
        self.nhwc = nhwc  # the model and ``x`` are in channels-last order: the covered copies are made so too
        self.t, self.z0, self.p0 = target, z0, p0
        self.used = batch_size
        self.plan: Plan | None = None
        self.fell_back: str | None = None
        self.macs_done = 0
        self.positions_done = 0
        self.plain_batch: int | None = None  # the batch size the plain method ran with, when it ran

    def notes(self) -> list[str]:
        if self.fell_back is not None:
            return [f"plain method: {self.fell_back}"]
        return []

    def _occluded(self, chunk: list[tuple[int, int]]) -> torch.Tensor:
        ph, pw = self.patch
        xs = self.x.repeat(len(chunk), 1, 1, 1)
        for i, (r, c) in enumerate(chunk):
            xs[i, :, r : r + ph, c : c + pw] = self.filler[0, :, r : r + ph, c : c + pw]
        return xs.contiguous(memory_format=torch.channels_last) if self.nhwc else xs

    def _incremental(self, chunk: list[tuple[int, int]], share: float, auto: bool = False) -> torch.Tensor | None:
        ph, pw = self.patch
        try:
            if self.plan is None:
                _, took = batched_logits(self.module, self.x.repeat(2, 1, 1, 1), 2)
                if took == 1:  # the model itself refuses batches: its traced graph must not be trusted with one
                    self.used = 1
                    self.fell_back = "the model takes one image at a time"
                    return None
                self.plan = trace(self.module, self.x)
            if auto and self.plan.macs_full < AUTO_MIN_MACS:
                self.fell_back = (f"{self.plan.macs_full / 1e6:.1f} million multiply-adds per image, too few for "
                                  f"windows to save time (from {AUTO_MIN_MACS / 1e6:.0f} million)")
                return None
            runner = Runner(self.plan, truncate_share=share)
            pieces = torch.stack([self.filler[0, :, r : r + ph, c : c + pw] for r, c in chunk])
            out = runner.run(pieces, [(r, c, ph, pw) for r, c in chunk])
        except NotTraceable as exc:
            self.fell_back = f"the model could not be traced ({exc})"
            return None
        except Exception as exc:  # an unforeseen graph: the exact plain method, and the record says why
            self.fell_back = f"the incremental method stopped ({type(exc).__name__}: {one_line(exc)})"
            return None
        if not isinstance(out, torch.Tensor) or out.dim() != 2 or out.shape[0] != len(chunk):
            self.fell_back = "the traced model did not give one row of logits per position"
            return None
        self.macs_done += runner.macs_done
        self.positions_done += len(chunk)
        return out

    def work_share(self) -> float | None:
        """Multiply-adds computed incrementally over those of one full forward pass per position."""
        if self.fell_back is not None or self.plan is None or not self.positions_done or not self.plan.macs_full:
            return None
        return self.macs_done / (self.positions_done * self.plan.macs_full)

    def __call__(self, spots: list[tuple[int, int]], method: str, share: float = 1.0
                 ) -> tuple[torch.Tensor, torch.Tensor]:
        drops_z = torch.empty(len(spots), dtype=torch.float64)
        drops_p = torch.empty(len(spots), dtype=torch.float64)
        start = 0
        while start < len(spots):
            chunk = spots[start : start + self.used]
            out = None
            if method in ("incremental", "auto") and self.fell_back is None:
                out = self._incremental(chunk, share, auto=method == "auto")
            if out is None:
                # whole images in batches small enough to stay in the CPU's caches (measured: on two cores
                # a ResNet-18 shape costs 26 ms an image in batches of 8 at 224 px and 37 ms in batches of
                # 64; at 512 px one at a time is fastest), never more than the batch size asked for
                fits = max(1, PIXELS_PER_BATCH // (self.x.shape[2] * self.x.shape[3]))
                out, took = batched_logits(self.module, self._occluded(chunk), min(self.used, fits))
                if took == 1 and min(self.used, fits) > 1:
                    self.used = 1  # the model refuses batches: one at a time from here on
                self.plain_batch = took
            drops_z[start : start + len(chunk)] = (self.z0 - out[:, self.t]).to(torch.float64)
            drops_p[start : start + len(chunk)] = (self.p0 - torch.softmax(out, dim=1)[:, self.t]).to(torch.float64)
            start += len(chunk)  # the batch may have shrunk to one after a fixed-batch model refused more
        return drops_z, drops_p


def _coarse_to_fine(drops: Drops, rows: list[int], cols: list[int], stride: int, share: float, h: int, w: int
                    ) -> tuple[torch.Tensor, torch.Tensor, str]:
    """Every position on twice the stride, then the ``share`` of the other positions ranked highest by the
    coarse map; the rest interpolated (bilinear in position) from the coarse grid."""
    ph, pw = drops.patch
    coarse_r, coarse_c = positions(h, ph, 2 * stride), positions(w, pw, 2 * stride)
    coarse = [(r, c) for r in coarse_r for c in coarse_c]
    cz, cp = drops(coarse, "auto")
    gz = cz.view(len(coarse_r), len(coarse_c))
    gp = cp.view(len(coarse_r), len(coarse_c))
    spots = [(r, c) for r in rows for c in cols]
    est_z = torch.tensor([_bilinear(gz, coarse_r, coarse_c, r, c) for r, c in spots], dtype=torch.float64)
    est_p = torch.tensor([_bilinear(gp, coarse_r, coarse_c, r, c) for r, c in spots], dtype=torch.float64)
    known = {s: i for i, s in enumerate(coarse)}
    rest = [i for i, s in enumerate(spots) if s not in known]
    for i, s in enumerate(spots):
        if s in known:
            est_z[i], est_p[i] = cz[known[s]], cp[known[s]]
    chosen = sorted(rest, key=lambda i: -float(est_z[i]))[: round(share * len(rest))]
    if chosen:
        fz, fp = drops([spots[i] for i in chosen], "auto")
        est_z[chosen], est_p[chosen] = fz, fp
    summary = (f"every position at stride {2 * stride} ({len(coarse)}), then {len(chosen)} of the other "
               f"{len(rest)} positions at stride {stride} where the coarse logit-drop map is highest "
               f"({share:.0%}); the rest interpolated from the coarse map")
    return est_z, est_p, summary


def _bilinear(grid: torch.Tensor, rs: list[int], cs: list[int], r: int, c: int) -> float:
    def locate(v: int, starts: list[int]) -> tuple[int, int, float]:
        if len(starts) == 1 or v <= starts[0]:
            return 0, 0, 0.0
        for j in range(len(starts) - 1):
            if starts[j] <= v <= starts[j + 1]:
                return j, j + 1, (v - starts[j]) / (starts[j + 1] - starts[j])
        return len(starts) - 1, len(starts) - 1, 0.0

    r0, r1, fr = locate(r, rs)
    c0, c1, fc = locate(c, cs)
    top = (1 - fc) * grid[r0, c0] + fc * grid[r0, c1]
    bottom = (1 - fc) * grid[r1, c0] + fc * grid[r1, c1]
    return float((1 - fr) * top + fr * bottom)
