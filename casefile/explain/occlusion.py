"""Occlusion sensitivity (Zeiler & Fergus 2014): the drop in the class score when a patch is covered."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import torch
import torch.nn.functional as F
from torch import nn

from casefile.errors import ExplainError

from ._common import (
    batched_logits,
    call_model,
    check_input,
    check_logits,
    model_left_as_found,
    pick_target,
    to_map,
)

OUTPUTS = ("probability", "logit")


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
) -> np.ndarray | OcclusionResult:
    """Occlusion map float32 [H, W]: the drop in the class probability (or logit) when a patch is filled.

    A patch larger than the image is clipped to the image. Overlapping patches are averaged per pixel.
    With ``return_all=True`` returns an :class:`OcclusionResult` holding both the probability-drop and
    the logit-drop maps and the per-position grids.
    """
    x = check_input(x)
    patch = _check_int("patch", patch)
    stride = _check_int("stride", stride)
    batch_size = _check_int("batch_size", batch_size)
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
    with model_left_as_found(module), torch.no_grad():
        base_logits = check_logits(call_model(module, x))
        t = pick_target(base_logits, target)
        z0 = base_logits[0, t]
        p0 = torch.softmax(base_logits[0], dim=0)[t]
        filler = fill_image(x, fill, blur_sigma=blur_sigma, patch=ph)
        drops_z = torch.empty(len(spots), dtype=torch.float64)
        drops_p = torch.empty(len(spots), dtype=torch.float64)
        used = batch_size
        for start in range(0, len(spots), batch_size):
            chunk = spots[start : start + batch_size]
            xs = x.repeat(len(chunk), 1, 1, 1)
            for i, (r, c) in enumerate(chunk):
                xs[i, :, r : r + ph, c : c + pw] = filler[0, :, r : r + ph, c : c + pw]
            out, used = batched_logits(module, xs, used)
            drops_z[start : start + len(chunk)] = (z0 - out[:, t]).to(torch.float64)
            drops_p[start : start + len(chunk)] = (p0 - torch.softmax(out, dim=1)[:, t]).to(torch.float64)
    maps = {}
    for name, drops in (("logit", drops_z), ("probability", drops_p)):
        total = torch.zeros((h, w), dtype=torch.float64)
        count = torch.zeros((h, w), dtype=torch.float64)
        for (r, c), d in zip(spots, drops, strict=True):
            total[r : r + ph, c : c + pw] += d
            count[r : r + ph, c : c + pw] += 1.0
        maps[name] = to_map(total / count)
    if not return_all:
        return maps[output]
    shape = (len(rows), len(cols))
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
    )
