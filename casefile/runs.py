"""What a run may vary (RunSettings) and the refusals that apply to a whole run, checked once, before any
input is read or any entry written (an append-only ledger keeps every mistake forever)."""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any, Literal

from casefile.errors import ExplainError, InputError, UsageError

if TYPE_CHECKING:
    from casefile.models import LoadedModel

DEFAULT_METHODS = ("gradcam", "occlusion", "gradient")
NamePolicy = Literal["base-name", "digest"]
NAME_POLICIES: tuple[str, ...] = ("base-name", "digest")


@dataclass(frozen=True)
class RunSettings:
    """What a run may vary. Together with the input and model digests it decides whether a case is new.

    ``patch``/``stride`` of None take about a seventh of the smaller model-input side (32 and 16 on a
    224-pixel input, the explain room's defaults) so small models get a useful occlusion grid too.
    ``max_pixels``/``max_file_pixels`` of None take the site settings' input size limits
    (casefile.imaging.limits). They decide only whether an input is read at all, so they are not part
    of the stored settings: a case recorded under one limit is the same case under another.
    ``name_policy`` "digest" records ``sha256:`` and 16 hex digits of the file's SHA-256 instead of its
    base name (as does a card with ``"record_file_name": false``; either one asking is enough); None
    follows the card. Like the limits it is not part of the stored settings.
    """

    methods: tuple[str, ...] = DEFAULT_METHODS
    layer: str | None = None
    patch: int | None = None
    stride: int | None = None
    fill: float | str | None = None
    occlusion_mode: str | None = None
    fidelity: float | None = None
    explain: dict[str, Any] = field(default_factory=dict)
    frame: int | None = None
    uid_policy: str = "keep-uids"
    max_pixels: int | None = None
    max_file_pixels: int | None = None
    name_policy: NamePolicy | None = None

    def names_by_digest(self, loaded: LoadedModel) -> bool:
        """True when inputs are recorded by digest, not by base name (this run or the card asks for it)."""
        return self.name_policy == "digest" or loaded.card.get("record_file_name") is False

    def with_limits(self) -> RunSettings:
        """These settings with the input size limits filled in from the site settings (read once, here,
        so that a malformed site file is refused before anything is recorded)."""
        from casefile.imaging import resolve_limits

        limits = resolve_limits(self.max_pixels, self.max_file_pixels)
        return replace(self, max_pixels=limits.max_pixels, max_file_pixels=limits.max_file_pixels)

    def resolve(self, loaded: LoadedModel) -> dict[str, Any]:
        """The full, stored settings for this model: every default filled in."""
        from casefile.explain.run import full_settings

        side = min(loaded.card["input"]["width"], loaded.card["input"]["height"])
        patch = self.patch or max(2, round(side / 7))
        stride = self.stride or max(1, patch // 2)
        overrides = {**self.explain, "occlusion_patch": patch, "occlusion_stride": stride}
        if "flag_policy" in loaded.card:  # the card's flags-or-notes choices, over the explain defaults
            overrides["flag_policy"] = {**loaded.card["flag_policy"], **self.explain.get("flag_policy", {})}
        if self.fill is not None:
            overrides["occlusion_fill"] = self.fill
        if self.occlusion_mode is not None:
            overrides["occlusion_mode"] = self.occlusion_mode
        if self.fidelity is not None:
            overrides["occlusion_fidelity"] = self.fidelity
        return {
            "methods": list(self.methods),
            "layer": self.layer or loaded.layer,
            "explain": full_settings(overrides),
            "windowing": loaded.card["windowing"],
            "uid_policy": self.uid_policy,
            "frame": self.frame,
            "preprocessing": loaded.preprocessing_record(),
        }


def _whole(name: str, value: object) -> int | None:
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int) or value < 1:
        raise UsageError(f"{name} {value!r}: expected a whole number of at least 1")
    return value


def check_occlusion_grid(loaded: LoadedModel, run: RunSettings) -> None:
    """Refuse an occlusion patch or stride that cannot work on this model's input, before any input."""
    spec = loaded.card["input"]
    width, height = spec["width"], spec["height"]
    card = loaded.card_name
    patch, stride = _whole("--patch", run.patch), _whole("--stride", run.stride)
    side = min(width, height)
    if patch is not None and patch > side:
        raise UsageError(f"--patch {patch}: larger than the model input ({width} x {height} px, from {card}); "
                         f"choose at most {side}")
    if stride is not None and stride > side:
        raise UsageError(f"--stride {stride}: larger than the model input ({width} x {height} px, from {card}); "
                         f"choose at most {side}")
    used = patch or max(2, round(side / 7))
    if stride is not None and stride > used:
        given = f"--patch {used}" if patch else f"the default patch of {used} px"
        raise UsageError(f"--stride {stride}: larger than {given}, so pixels between patches would never be "
                         "covered; choose a stride no larger than the patch")


def _check_fill(fill: object) -> None:
    if fill is None or fill in ("mean", "blur"):
        return
    if isinstance(fill, bool) or not isinstance(fill, int | float) or not math.isfinite(float(fill)):
        raise UsageError(f"--fill {fill!r}: expected a finite number, 'mean' or 'blur'")


def _check_mode(run: RunSettings) -> None:
    from casefile.explain.occlusion import EXACT_MODES, MODES

    mode = run.occlusion_mode
    if mode is not None and mode not in MODES:
        raise UsageError(f"--occlusion-mode {mode!r}: choose one of {', '.join(MODES)}")
    if run.fidelity is not None:
        if (mode or "auto") in EXACT_MODES:
            raise UsageError(f"--fidelity {run.fidelity!r}: only an approximate --occlusion-mode (truncated or "
                             "coarse-to-fine) takes a fidelity; the exact modes compute every position in full")
        f = run.fidelity
        if isinstance(f, bool) or not isinstance(f, int | float) or not 0 < float(f) <= 1:
            raise UsageError(f"--fidelity {f!r}: expected a number above 0 and at most 1")


def preflight(loaded: LoadedModel, run: RunSettings) -> dict[str, Any]:
    """Refuse, before any input is touched, a run that cannot work for this model at all; return the
    resolved settings (unknown explanation settings fail here, once, not per input)."""
    from casefile.explain import METHODS
    from casefile.explain.gradcam import hookable_layer

    unknown = [m for m in run.methods if m not in METHODS]
    if unknown or not run.methods:
        raise UsageError(f"--methods: unknown method {', '.join(map(repr, unknown)) or 'none'}; choose from "
                         f"{', '.join(METHODS)}")
    if run.name_policy is not None and run.name_policy not in NAME_POLICIES:
        raise UsageError(f"--name-policy {run.name_policy!r}: choose {' or '.join(NAME_POLICIES)}")
    if run.frame is not None and (isinstance(run.frame, bool) or not isinstance(run.frame, int) or run.frame < 0):
        raise UsageError(f"--frame {run.frame!r}: expected a frame number from 0")
    check_occlusion_grid(loaded, run)
    _check_fill(run.fill)
    _check_mode(run)
    settings = run.resolve(loaded)
    if "gradcam" in run.methods:
        try:
            hookable_layer(loaded.module, settings["layer"])
        except ExplainError as exc:
            raise ExplainError(f"{loaded.source.get('file_name', 'model')}: {exc} "
                               "(or choose --methods occlusion,gradient)") from None
    return settings


def check_inputs(inputs: Sequence[str | os.PathLike[str]]) -> None:
    """Refuse a path given on the command line that does not exist (a typo), before anything is recorded."""
    for p in inputs:
        if not os.path.lexists(p):
            raise InputError(f"{p}: no such file or folder; nothing was recorded")
