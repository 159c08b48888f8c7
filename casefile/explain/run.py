"""One call that scores an input, draws the explanation maps and runs the sanity checks → Explanation.

Default settings (:data:`DEFAULT_SETTINGS`) and why:

- ``occlusion_patch`` 32, ``occlusion_stride`` 16: for inputs of about 224 px a 32 px patch covers a
  region the size of a typical finding while leaving 169 positions; a stride of half the patch lets
  every interior pixel be covered by four patches so the map is smooth (common practice since
  Zeiler & Fergus 2014).
- ``occlusion_fill`` 0.0: after the usual mean/std normalisation 0 is the training mean, i.e. "no
  information" rather than black or white; "mean" (per-channel mean of this image) and "blur" (a
  Gaussian-blurred copy, sigma = patch / 4 unless ``occlusion_blur_sigma`` is set) are offered.
- ``occlusion_output`` "probability": a drop in probability is what a reader understands; "logit"
  does not saturate and is offered. ``occlusion_batch_size`` 64: the most positions computed at once
  (it bounds memory); the plain method further keeps each batch within 8 x 224 x 224 pixels, because
  on a quiet two-core machine a ResNet-18 shape cost 26 ms an image in batches of 8 at 224 px against
  37 ms in batches of 64, and at 512 px one image at a time was fastest (``occlusion.PIXELS_PER_BATCH``).
- ``occlusion_mode`` "auto": "incremental" for a model of at least 100 million multiply-adds per image,
  else "batched". "incremental" is exact (equal to one forward pass per position up to float rounding,
  tested on many architectures) and faster on a CPU for such models, because each covered image is
  computed as a change to one cached run (``casefile.explain.incremental``); on a model of a few million
  multiply-adds the windows are so small that the plain method is as fast. A model that cannot be
  traced is run by "batched"; the map's record says which was used and why. "truncated" and "coarse-to-fine" are
  approximate, recorded as such with their ``occlusion_fidelity`` (default 0.5 and 0.25), and never the
  default: a reviewer must know when a map is an estimate.
- ``randomisation_method``, ``deletion_method``, ``focus_method`` "gradcam": the map the checks are
  run on (falls back to the first method computed when it is not among ``methods``).
- ``deletion_fill`` "same": cover pixels exactly as occlusion does, so the two tests agree on what
  "removed" means.
- An explanation shows what influenced the model, not whether the model is right; the checks say
  how far a map can be trusted, they are not a diagnosis or an inspection verdict. Decisions rest
  with qualified staff under local clinical, regulatory and inspection practice.
- Check thresholds: see :mod:`casefile.explain.checks` (``CHECK_DEFAULTS``), where each is justified.
- ``flag_policy``: which check outcomes send the case to a person (a flag) and which only inform (a
  note), check name -> ``flag-on-warn`` / ``flag-on-fail`` / ``note``; a partial mapping (e.g. from a
  model card) is laid over :data:`casefile.flags.DEFAULT_FLAG_POLICY`, whose reasons are in
  :mod:`casefile.explain.checks`. The full policy used is kept in the settings.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import torch
from torch import nn

from casefile.canonical import json_ready
from casefile.errors import ExplainError
from casefile.flags import DEFAULT_FLAG_POLICY, Outcome, flagging_checks, merged_policy, policy_problem, worst
from casefile.software import software_versions

from . import checks as ck
from ._common import check_input, forward_logits, model_left_as_found, pick_target
from .gradcam import gradcam, gradient
from .occlusion import occlusion

METHODS = ("gradcam", "occlusion", "gradient")

DEFAULT_SETTINGS: dict[str, Any] = {
    "occlusion_patch": 32,
    "occlusion_stride": 16,
    "occlusion_fill": 0.0,
    "occlusion_output": "probability",
    "occlusion_batch_size": 64,
    "occlusion_blur_sigma": None,
    "occlusion_mode": "auto",
    "occlusion_fidelity": None,
    "randomisation_method": "gradcam",
    "deletion_method": "gradcam",
    "deletion_fill": "same",
    "focus_method": "gradcam",
    "flag_policy": dict(DEFAULT_FLAG_POLICY),
    **ck.CHECK_DEFAULTS,
}

def apply_flag_policy(found: Sequence[ck.Check], policy: Mapping[str, str]) -> list[str]:
    """Set each check's ``flags`` by ``policy``; return the names of the checks that flag, in order."""
    named = flagging_checks([{"name": c.name, "outcome": c.outcome} for c in found], policy)
    for c in found:
        c.flags = c.name in named
    return named


@dataclass
class Explanation:
    """Scores, maps and check outcomes for one input."""

    scores: dict[str, float]
    label_index: int
    label: str
    confidence: float
    logits: list[float]
    maps: dict[str, np.ndarray]
    map_params: dict[str, dict[str, Any]]
    checks: list[ck.Check]
    settings: dict[str, Any]
    versions: dict[str, str]
    status: Outcome
    target_source: str = "predicted"
    notes: list[str] = field(default_factory=list)
    flags: list[str] = field(default_factory=list)

    @property
    def flagged(self) -> bool:
        """True when at least one check's outcome sends this case to a person."""
        return bool(self.flags)

    def map_bytes(self, method: str) -> bytes:
        """The raw map of ``method`` as float32 little-endian bytes (row-major [H, W])."""
        return np.ascontiguousarray(self.maps[method], dtype="<f4").tobytes()

    def to_record(self) -> dict[str, Any]:
        """Plain JSON-ready data without the arrays; every float finite (non-finite ones become None)."""
        maps = []
        for method, m in self.maps.items():
            finite = bool(np.all(np.isfinite(m)))
            maps.append(
                {
                    "method": method,
                    "params": self.map_params.get(method, {}),
                    "shape": [int(m.shape[0]), int(m.shape[1])],
                    "min": float(np.min(m)) if finite else None,
                    "max": float(np.max(m)) if finite else None,
                }
            )
        return json_ready(
            {
                "label": self.label,
                "label_index": self.label_index,
                "confidence": self.confidence,
                "scores": self.scores,
                "logits": self.logits,
                "target_source": self.target_source,
                "maps": maps,
                "checks": [c.to_dict() for c in self.checks],
                "settings": self.settings,
                "versions": self.versions,
                "status": self.status,
                "flagged": self.flagged,
                "flags": self.flags,
                "notes": self.notes,
            }
        )


def full_settings(settings: Mapping[str, Any] | None) -> dict[str, Any]:
    """DEFAULT_SETTINGS overlaid with ``settings``; an unknown key is a one-line ExplainError."""
    merged = dict(DEFAULT_SETTINGS)
    for key, value in (settings or {}).items():
        if key not in DEFAULT_SETTINGS:
            raise ExplainError(f"settings: unknown key {key!r}; known keys: {', '.join(DEFAULT_SETTINGS)}")
        merged[key] = value
    from .occlusion import check_mode

    check_mode(merged["occlusion_mode"], merged["occlusion_fidelity"], "settings: ")
    problem = policy_problem(merged["flag_policy"])
    if problem:
        raise ExplainError(f"settings: flag_policy: {problem}")
    merged["flag_policy"] = merged_policy(merged["flag_policy"])
    return merged


def _occlusion_kwargs(s: dict[str, Any]) -> dict[str, Any]:
    return {
        "patch": s["occlusion_patch"],
        "stride": s["occlusion_stride"],
        "fill": s["occlusion_fill"],
        "batch_size": s["occlusion_batch_size"],
        "blur_sigma": s["occlusion_blur_sigma"],
        "output": s["occlusion_output"],
        "mode": s["occlusion_mode"],
        "fidelity": s["occlusion_fidelity"],
    }


def _map_fn(method: str, s: dict[str, Any], layer: str | None) -> ck.MapFn:
    """The map of ``method`` as a function of (module, x, target), for the randomisation test."""
    if method == "gradcam":
        return lambda m, x, t: gradcam(m, x, t, layer=layer)
    if method == "occlusion":
        return lambda m, x, t: occlusion(m, x, t, **_occlusion_kwargs(s))
    return gradient


def run(
    module: nn.Module,
    x: torch.Tensor,
    *,
    target: int | None = None,
    labels: Sequence[str],
    layer: str | None,
    methods: Sequence[str] = METHODS,
    settings: Mapping[str, Any] | None = None,
    roi: np.ndarray | None = None,
) -> Explanation:
    """Score ``x`` with ``module``, compute the maps in ``methods`` and run every check."""
    x = check_input(x)
    s = full_settings(settings)
    methods = list(dict.fromkeys(methods))
    unknown = [m for m in methods if m not in METHODS]
    if unknown or not methods:
        raise ExplainError(f"methods: {unknown or 'none'} not among {', '.join(METHODS)}")
    if "gradcam" in methods and not layer:
        raise ExplainError("layer: Grad-CAM needs a layer name (the model card's default layer or --layer)")
    if roi is not None and np.asarray(roi).shape != tuple(x.shape[2:]):
        raise ExplainError(
            f"roi mask: shape {np.asarray(roi).shape} does not match the model input {tuple(x.shape[2:])}"
        )
    with model_left_as_found(module):
        logits = forward_logits(module, x)
    if len(labels) != logits.shape[1]:
        raise ExplainError(
            f"labels: {len(labels)} labels given but the model outputs {logits.shape[1]} classes"
        )
    t = pick_target(logits, target)
    probs = torch.softmax(logits[0].to(torch.float64), dim=0).numpy()
    maps: dict[str, np.ndarray] = {}
    params: dict[str, dict[str, Any]] = {}
    occ_result = None
    for method in methods:
        if method == "occlusion":
            occ_result = occlusion(module, x, t, return_all=True, **_occlusion_kwargs(s))
            maps[method] = getattr(occ_result, s["occlusion_output"])
            params[method] = {
                **_occlusion_kwargs(s),
                "patch_used": list(occ_result.patch),
                "grid": [len(occ_result.rows), len(occ_result.cols)],
                "batch_size_used": occ_result.batch_size,
                "mode": occ_result.mode,
                "fidelity": None if occ_result.exact else occ_result.fidelity,
                "exact": occ_result.exact,
                "summary": occ_result.summary,
                "notes": occ_result.notes,
            }
        else:
            maps[method] = _map_fn(method, s, layer)(module, x, t)
            params[method] = (
                {"layer": layer}
                if method == "gradcam"
                else {"value": "max over channels of |d logit / d pixel|"}
            )

    def chosen(key: str) -> str:
        return s[key] if s[key] in maps else methods[0]

    found = [
        ck.numerical({"input": x, "logits": logits, **{f"map {k}": v for k, v in maps.items()}}),
        ck.confidence(probs, t, settings=s),
    ]
    rnd = chosen("randomisation_method")
    randomised = ck.randomisation(module, x, t, _map_fn(rnd, s, layer), original=maps[rnd], settings=s)
    randomised.meaning = f"{rnd}: {randomised.meaning}"
    found.append(randomised)
    if "gradcam" in maps and occ_result is not None:
        grid = (len(occ_result.rows), len(occ_result.cols))
        # The logit-drop map: probability drops vanish on a confident model and would rank noise.
        found.append(ck.method_agreement(maps["gradcam"], occ_result.logit, grid=grid, settings=s))
    else:
        found.append(
            ck.not_run("method_agreement", s["agreement_pass"], "needs both Grad-CAM and occlusion maps")
        )
    fill = s["occlusion_fill"] if s["deletion_fill"] == "same" else s["deletion_fill"]
    found.append(ck.deletion(module, x, t, maps[chosen("deletion_method")], fill=fill, settings=s))
    found.append(ck.region_focus(maps[chosen("focus_method")], roi, settings=s))
    logit_list = [float(v) for v in logits[0].tolist()]
    flagged_by = apply_flag_policy(found, s["flag_policy"])
    return Explanation(
        scores={str(lab): float(p) for lab, p in zip(labels, probs, strict=True)},
        label_index=t,
        label=str(labels[t]),
        confidence=float(probs[t]),
        logits=logit_list,
        maps=maps,
        map_params=params,
        checks=found,
        settings=s,
        versions=software_versions(),
        status=worst([c.outcome for c in found]),
        target_source="predicted" if target is None else "given",
        flags=flagged_by,
    )
