"""Sanity checks on an explanation, each giving a value, a threshold, an outcome and one line of meaning.

Default thresholds live in :data:`CHECK_DEFAULTS`; the reasons for them:

- ``randomisation_pass`` 0.5 / ``randomisation_fail`` 0.7 (|Spearman| between the map and the map of
  a copy whose top layers were re-initialised). A map that still ranks pixels the same way after the
  learned weights are destroyed cannot be showing what the model learned (Adebayo et al. 2018, who
  found edge-detector-like maps stay near |rho| = 1). On a 2-D map, |rho| >= 0.7 is conventionally a
  strong association and < 0.5 at most moderate (common practice for reading correlations); the band
  between is a warning for a human look rather than a verdict.
- ``randomisation_layers`` 0 = cascade through every parameterised layer, top (head) first, as in the
  cascading test of Adebayo et al. 2018; the value reported is the |rho| after the last step (the
  most randomised model), because a map may legitimately survive re-initialising the head alone
  (the feature maps still carry the image) and only must change once the learned layers are gone.
  Every step's |rho| is listed in the meaning line. Measured on the small CNNs of the tests: after
  the head alone |rho| was 0.6-0.98, after the full cascade 0.0-0.36; a max over the steps would
  fail sound models.
- ``agreement_pass`` 0.5 (Spearman between Grad-CAM and occlusion on a common grid). The two methods
  measure different things (gradient-weighted features vs. the output change when a region is
  covered) and disagree often even on sound models, so low agreement is a warning, never a failure.
  ``run`` compares with the logit-drop occlusion map, which does not saturate on confident models.
- ``deletion_fraction`` 0.1, ``deletion_random_masks`` 8, ``deletion_margin`` ln 2 = 0.693: covering
  the top 10% attributed pixels must lower the log-odds of the class, log(p / (1 - p)), by at least
  ln 2 more than covering a randomly placed block of the same area (mean over 8 seeded blocks), i.e.
  it must at least halve the odds relative to the random blocks. Log-odds, not probability, because
  a confident model sits at p = 1.000 where probability drops vanish. Blocks, not scattered pixels,
  because attributed pixels form regions and scattered pixels are a baseline too easy to beat.
  A drop no larger than the random mean fails; a smaller positive margin warns.
- ``focus_fail`` 0.6 / ``focus_pass`` 0.8: share of positive attribution inside the region of interest.
  A model that reads a corner marker, ruler or burned-in text puts most of its mass outside the
  region; below 0.6 most of the evidence lies elsewhere. Read it with the region's size in mind: a
  map spread evenly gives a share equal to the region's share of the image. (The share is the
  "energy-based pointing game" measure of Wang et al. 2020, from memory.)
- ``confidence_warn`` 0.6 / ``confidence_margin`` 0.1: a top-class probability below 0.6 warns (the
  model is unsure but still has a clear leader); a runner-up within 0.1 of the top class fails: the
  model cannot tell its two leading labels apart, so the label on record is close to a coin toss
  between them and a person must decide (both values common practice in triage work-lists).

Flags and notes (:data:`casefile.flags.DEFAULT_FLAG_POLICY`). A *flag* sends the case to a person; a
*note* only informs. A flag must be rare on sound work and near-certain on the failures it exists for,
so each check is classed by what its outcome says about the case, and the classes were measured on the
demo (``benchmarks/bench_flags.py`` prints the rates over several scenario seeds):

- ``numerical`` flags on fail: a NaN or infinity means no number on the record can be trusted.
- ``confidence`` flags on fail, a warn is a note: a model that cannot tell its two leading labels
  apart has given no usable answer, and a triage work-list sends such cases to a reader (common
  practice); a top probability below 0.6 with a clear leader informs. On the demo the fail catches
  the honest model's one wrong answer and the shortcut model's cases without the marker, where it is
  lost; flagging every warn as well would send 18 to 22 % of the honest cases on other scenario seeds.
- ``randomisation`` flags on fail, a warn is a note: a failed cascade means the map does not depend on
  what the model learned, so the map, and the region-focus check computed from it, cannot be read at
  all; the warn band (0.5 to 0.7) is a moderate correlation, worth a look but no verdict.
- ``region_focus`` flags on warn: it is the check for shortcut learning (a model reading a marker,
  ruler or the border), the failure a second read exists to catch; on the demo's shortcut model a
  third of the cases only warn, so a fail-only rule would miss them.
- ``deletion`` is a note: covering pixels makes pictures the model never saw, so the drop measures the
  model's response to the fill as well as the map's fidelity (Hooker et al. 2019, from memory); on the
  demo's honest model its value spreads from -2 to +33 log-odds and it fails one case in ten, which
  says more about the test's noise on one picture than about the case.
- ``method_agreement`` is a note: Grad-CAM and occlusion measure different things and often disagree on
  sound models (it warned on about half of the honest demo cases).

A model card may override any of these (``"flag_policy": {"confidence": "note"}``); the policy used is
stored in the case settings (``explain.flag_policy``).
"""

from __future__ import annotations

import copy
import math
from collections.abc import Callable, Iterator, Mapping
from contextlib import contextmanager
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
import torch
from torch import nn

from casefile.errors import ExplainError
from casefile.flags import Outcome

from ._common import batched_logits, model_left_as_found
from .occlusion import fill_image
from .similarity import area_resample, spearman

CHECK_DEFAULTS: dict[str, Any] = {
    "randomisation_pass": 0.5,
    "randomisation_fail": 0.7,
    "randomisation_layers": 0,
    "randomisation_seed": 0,
    "agreement_pass": 0.5,
    "deletion_fraction": 0.1,
    "deletion_random_masks": 8,
    "deletion_margin": 0.693,
    "deletion_seed": 0,
    "focus_fail": 0.6,
    "focus_pass": 0.8,
    "confidence_warn": 0.6,
    "confidence_margin": 0.1,
}

MapFn = Callable[[nn.Module, torch.Tensor, int], np.ndarray]


@dataclass
class Check:
    """Outcome of one sanity check; ``flags`` is set by the flag policy (None until it is applied)."""

    name: str
    value: float | None
    threshold: float | None
    outcome: Outcome
    meaning: str
    flags: bool | None = None

    def to_dict(self) -> dict[str, Any]:
        """Plain data; a non-finite value becomes None; ``flags`` only once the policy has decided it."""
        d = asdict(self)
        for key in ("value", "threshold"):
            if d[key] is not None and not math.isfinite(d[key]):
                d[key] = None
        if d["flags"] is None:
            del d["flags"]
        return d


def _get(settings: Mapping[str, Any] | None, key: str) -> Any:
    if settings is not None and key in settings:
        return settings[key]
    return CHECK_DEFAULTS[key]


def _finite(a: np.ndarray | torch.Tensor) -> bool:
    return bool(np.all(np.isfinite(np.asarray(a, dtype=np.float64))))


def not_run(name: str, threshold: float | None, why: str) -> Check:
    """A check that could not run, saying why in its meaning line."""
    return Check(name, None, threshold, "not-run", why)


# --- randomisation -----------------------------------------------------------------------------


def top_layers(module: nn.Module) -> list[tuple[str, nn.Module]]:
    """Modules that own parameters, in reverse registration order (the head first)."""
    own = [(n, m) for n, m in module.named_modules() if next(m.parameters(recurse=False), None) is not None]
    return list(reversed(own))


def reinitialise(m: nn.Module, gen: torch.Generator) -> None:
    """Overwrite ``m``'s own parameters with U(-1/sqrt(fan_in), 1/sqrt(fan_in)) draws from ``gen``.

    The bound is PyTorch's default for linear and convolution layers; layers without a matrix
    (normalisation, bias-only) use their own size as fan-in.
    """
    params = list(m.parameters(recurse=False))
    mats = [p for p in params if p.dim() >= 2]
    fan_in = int(np.prod(mats[0].shape[1:])) if mats else max(1, params[0].numel())
    bound = 1.0 / math.sqrt(max(1, fan_in))
    with torch.no_grad():
        for p in params:
            draw = torch.rand(p.shape, generator=gen, dtype=torch.float64) * 2.0 - 1.0
            p.copy_((draw * bound).to(p.dtype))


@contextmanager
def _scratch_model(module: nn.Module) -> Iterator[nn.Module]:
    """A model the randomisation test may overwrite: a deep copy, or, for modules that cannot be
    copied (some exported graphs), the module itself with every parameter restored bit for bit after."""
    try:
        twin = copy.deepcopy(module)
    except Exception:  # fall back to in-place work with an exact restore
        twin = None
    if twin is not None:
        yield twin
        return
    saved = [(p, p.detach().clone()) for p in module.parameters()]
    try:
        yield module
    finally:
        with torch.no_grad():
            for p, value in saved:
                p.copy_(value)


def randomisation(
    module: nn.Module,
    x: torch.Tensor,
    target: int,
    map_fn: MapFn,
    *,
    original: np.ndarray | None = None,
    settings: Mapping[str, Any] | None = None,
) -> Check:
    """Cascading model-randomisation test (Adebayo et al. 2018) of the map given by ``map_fn``.

    Works on a deep copy (or restores every parameter exactly afterwards): re-initialises the head, then each
    next parameterised layer down, with a fixed seed, recomputing the map each time. The value is
    |Spearman| between the original map and the map after the last step.
    """
    name = "randomisation"
    lo, hi = float(_get(settings, "randomisation_pass")), float(_get(settings, "randomisation_fail"))
    if original is None:
        original = map_fn(module, x, target)
    if not _finite(original):
        return not_run(name, lo, "the original map is not finite, so it cannot be compared")
    if spearman(original, original) is None:
        return not_run(
            name, lo, "the original map is flat (all values equal); rank correlation is undefined"
        )
    with _scratch_model(module) as twin:
        layers = top_layers(twin)
        depth = int(_get(settings, "randomisation_layers")) or len(layers)
        layers = layers[:depth]
        if not layers:
            return not_run(name, lo, "the model has no parameters to re-initialise")
        gen = torch.Generator().manual_seed(int(_get(settings, "randomisation_seed")))
        steps: list[float] = []
        with model_left_as_found(twin):
            for _, layer in layers:
                reinitialise(layer, gen)
                fresh = map_fn(twin, x, target)
                rho = spearman(original, fresh) if _finite(fresh) else None
                # A map that goes flat or non-finite after re-initialisation no longer ranks pixels like the original.
                steps.append(0.0 if rho is None else abs(rho))
    value = steps[-1]
    shown = ", ".join(f"{s:.2f}" for s in steps[:8]) + (" ..." if len(steps) > 8 else "")
    where = f"after re-initialising {len(steps)} layer(s) from the top (|rho| per step: {shown})"
    if value < lo:
        return Check(
            name, value, lo, "pass", f"the map changes when the learned weights are destroyed, {where}"
        )
    outcome = "warn" if value < hi else "fail"
    return Check(
        name, value, lo, outcome, f"the map barely changes when the learned weights are destroyed, {where}"
    )


# --- agreement, deletion, focus ----------------------------------------------------------------


def method_agreement(
    map_a: np.ndarray, map_b: np.ndarray, *, grid: tuple[int, int], settings: Mapping[str, Any] | None = None
) -> Check:
    """Spearman between two maps after area-averaging both to ``grid``; low agreement warns."""
    name = "method_agreement"
    lo = float(_get(settings, "agreement_pass"))
    if not (_finite(map_a) and _finite(map_b)):
        return not_run(name, lo, "a map is not finite, so the methods cannot be compared")
    rho = spearman(area_resample(map_a, grid), area_resample(map_b, grid))
    if rho is None:
        return not_run(
            name, lo, "a map is flat (all values equal) on the common grid; rank correlation is undefined"
        )
    if rho >= lo:
        return Check(
            name, rho, lo, "pass", f"Grad-CAM and occlusion rank regions alike on a {grid[0]}x{grid[1]} grid"
        )
    return Check(
        name,
        rho,
        lo,
        "warn",
        f"Grad-CAM and occlusion rank regions differently on a {grid[0]}x{grid[1]} grid",
    )


def _random_block(h: int, w: int, k: int, rng: np.random.Generator) -> np.ndarray:
    side_h = min(h, max(1, int(math.ceil(math.sqrt(k)))))
    side_w = min(w, int(math.ceil(k / side_h)))
    r = int(rng.integers(0, h - side_h + 1))
    c = int(rng.integers(0, w - side_w + 1))
    idx = (np.arange(r, r + side_h)[:, None] * w + np.arange(c, c + side_w)[None, :]).ravel()[:k]
    mask = np.zeros(h * w, dtype=bool)
    mask[idx] = True
    return mask.reshape(h, w)


def deletion(
    module: nn.Module,
    x: torch.Tensor,
    target: int,
    attribution: np.ndarray,
    *,
    fill: float | str = "mean",
    settings: Mapping[str, Any] | None = None,
) -> Check:
    """Log-odds drop after covering the top-attributed pixels minus the mean drop for random blocks."""
    name = "deletion"
    margin = float(_get(settings, "deletion_margin"))
    _, _, h, w = x.shape
    if attribution.shape != (h, w):
        raise ExplainError(f"deletion: map shape {attribution.shape} does not match the input {h}x{w}")
    if not _finite(attribution):
        return not_run(name, margin, "the map is not finite, so its top pixels are undefined")
    if float(np.max(attribution)) == float(np.min(attribution)):
        return not_run(name, margin, "the map is flat (all values equal), so it singles out no pixels")
    k = max(1, int(round(float(_get(settings, "deletion_fraction")) * h * w)))
    top = np.zeros(h * w, dtype=bool)
    top[np.argsort(-attribution.ravel(), kind="stable")[:k]] = True
    rng = np.random.default_rng(int(_get(settings, "deletion_seed")))
    masks = [top.reshape(h, w)] + [
        _random_block(h, w, k, rng) for _ in range(int(_get(settings, "deletion_random_masks")))
    ]
    with model_left_as_found(module), torch.no_grad():
        filler = fill_image(x, fill)
        m = torch.as_tensor(np.stack(masks))[:, None].to(x.device)
        xs = torch.where(m, filler, x)
        z = batched_logits(module, torch.cat([x, xs]), len(masks) + 1)[0].to(torch.float64)
    if not _finite(z):
        return not_run(name, margin, "the model gave non-finite scores on the covered images")
    others = torch.cat([z[:, :target], z[:, target + 1 :]], dim=1)
    odds = (z[:, target] - torch.logsumexp(others, dim=1)).numpy()
    probs = torch.softmax(z, dim=1)[:, target].numpy()
    drops = odds[0] - odds[1:]
    value = float(drops[0] - drops[1:].mean())
    said = (
        f"covering the top {k} pixels lowers the log-odds by {drops[0]:.2f} vs {drops[1:].mean():.2f} for random blocks"
        f" (probability {probs[0]:.3f} -> {probs[1]:.3f} vs {np.mean(probs[2:]):.3f})"
    )
    if value > margin:
        return Check(name, value, margin, "pass", said)
    return Check(name, value, margin, "warn" if value > 0 else "fail", said)


def region_focus(
    attribution: np.ndarray, roi: np.ndarray | None, *, settings: Mapping[str, Any] | None = None
) -> Check:
    """Share of the positive attribution that lies inside the region of interest ``roi`` (bool [H, W])."""
    name = "region_focus"
    lo, hi = float(_get(settings, "focus_fail")), float(_get(settings, "focus_pass"))
    if roi is None:
        return not_run(name, hi, "no region of interest was given")
    roi = np.asarray(roi)
    if roi.shape != attribution.shape:
        raise ExplainError(f"roi mask: shape {roi.shape} does not match the map {attribution.shape}")
    if not roi.any():
        return not_run(name, hi, "the region of interest is empty")
    if not _finite(attribution):
        return not_run(name, hi, "the map is not finite")
    pos = np.maximum(np.asarray(attribution, dtype=np.float64), 0.0)
    total = float(pos.sum())
    if total <= 0.0:
        return not_run(name, hi, "the map has no positive attribution to place")
    share = float(pos[roi.astype(bool)].sum() / total)
    where = (
        f"{share:.0%} of the attribution lies inside the region of interest ({roi.mean():.0%} of the image)"
    )
    outcome = "pass" if share >= hi else ("warn" if share >= lo else "fail")
    return Check(name, share, hi, outcome, where)


# --- confidence and numbers --------------------------------------------------------------------


def confidence(
    probabilities: np.ndarray, label_index: int, *, settings: Mapping[str, Any] | None = None
) -> Check:
    """Top-class probability against ``confidence_warn`` (warn) and its margin to the runner-up against
    ``confidence_margin`` (fail: the model cannot tell its two leading labels apart)."""
    name = "confidence"
    lo, gap = float(_get(settings, "confidence_warn")), float(_get(settings, "confidence_margin"))
    p = np.asarray(probabilities, dtype=np.float64).ravel()
    if not _finite(p):
        return not_run(name, lo, "the class probabilities are not finite")
    top = float(p[label_index])
    second = float(np.max(np.delete(p, label_index))) if p.size > 1 else 0.0
    said = f"probability {top:.3f} for the explained class, {top - second:+.3f} over the next class"
    if top - second < gap:
        return Check(name, top, lo, "fail", f"{said}: the model cannot tell its two leading labels apart")
    if top < lo:
        return Check(name, top, lo, "warn", f"{said}: the model is unsure")
    return Check(name, top, lo, "pass", said)


def numerical(named: Mapping[str, np.ndarray | torch.Tensor]) -> Check:
    """Every score and map finite: fail naming each array with NaN or infinite values."""
    bad = []
    count = 0
    for key, arr in named.items():
        a = np.asarray(arr.detach().cpu() if isinstance(arr, torch.Tensor) else arr, dtype=np.float64)
        n_nan, n_inf = int(np.isnan(a).sum()), int(np.isinf(a).sum())
        if n_nan or n_inf:
            count += n_nan + n_inf
            bad.append(f"{key} ({n_nan} NaN, {n_inf} infinite of {a.size})")
    if bad:
        return Check("numerical", float(count), 0.0, "fail", "not finite: " + "; ".join(bad))
    return Check("numerical", 0.0, 0.0, "pass", f"all scores and maps are finite ({', '.join(named)})")
