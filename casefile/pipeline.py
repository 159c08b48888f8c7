"""File → scan → model → explanation → record → ledger → sheet, for one input and for a batch (resumable)."""

from __future__ import annotations

import hashlib
import math
import os
import sys
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any, Literal

from casefile.errors import (
    CasefileError,
    DuplicateCaseError,
    ExplainError,
    InputError,
    OutputError,
    UsageError,
    ValidationError,
)
from casefile.files import write_atomic
from casefile.ledger import Ledger, utc_now
from casefile.record import CaseRecord, build, settings_digest
from casefile.software import software_versions

if TYPE_CHECKING:  # types only; the heavy rooms are imported where they are first needed
    import numpy as np

    from casefile.imaging import Scan
    from casefile.models import LoadedModel

DEFAULT_METHODS = ("gradcam", "occlusion", "gradient")
NamePolicy = Literal["base-name", "digest"]
NAME_POLICIES: tuple[str, ...] = ("base-name", "digest")
WITHHELD = "(name withheld)"


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
        if self.fill is not None:
            overrides["occlusion_fill"] = self.fill
        return {
            "methods": list(self.methods),
            "layer": self.layer or loaded.layer,
            "explain": full_settings(overrides),
            "windowing": loaded.card["windowing"],
            "uid_policy": self.uid_policy,
            "frame": self.frame,
            "preprocessing": loaded.preprocessing_record(),
        }


@dataclass
class Outcome:
    """What happened to one input: recorded, skipped (already recorded) or failed (with the reason)."""

    input: str
    outcome: str
    case_id: str | None = None
    seq: int | None = None
    hash: str | None = None
    reason: str | None = None
    body: dict[str, Any] | None = None
    sheet: str | None = None

    @property
    def problem(self) -> str:
        """The reason without the file name it starts with (for lines that name the input already)."""
        why = self.reason or "unknown"
        for lead in (f"{self.input}: ", f"{Path(self.input).name}: "):
            if why.startswith(lead):
                return why[len(lead):]
        return why

    def line(self) -> str:
        """``failed: <input>: <problem>``, the path once."""
        return f"failed: {self.input}: {self.problem}"

    def json_line(self) -> dict[str, Any]:
        """The line `casefile explain --json` prints (schemas/explain_line.schema.json)."""
        line: dict[str, Any] = {"input": self.input, "outcome": self.outcome, "case_id": self.case_id,
                                "seq": self.seq, "hash": self.hash}
        if self.outcome == "failed":
            line["reason"] = self.reason
            return line
        b = self.body or {}
        line.update({
            "input_digest": b["input"]["file_sha256"],
            "model_digest": b["model"]["digest"],
            "label": b["result"]["label"],
            "confidence": b["result"]["confidence"],
            "checks": {c["name"]: c["outcome"] for c in b["checks"]},
            "status": b["status"],
        })
        if self.sheet:
            line["sheet"] = self.sheet
        return line


@dataclass
class BatchSummary:
    recorded: int = 0
    skipped: int = 0
    failed: list[tuple[str, str]] = field(default_factory=list)
    outcomes: list[Outcome] = field(default_factory=list)
    interrupted: bool = False

    def text(self, *, list_failures: bool = True) -> str:
        """The counts; with ``list_failures``, one line per failed input (leave them out when they were
        already printed as they happened)."""
        lines = [f"recorded {self.recorded}, skipped as already recorded {self.skipped}, failed {len(self.failed)}"]
        if list_failures:
            lines += ["  " + Outcome(name, "failed", reason=why).line() for name, why in self.failed]
        if self.interrupted:
            lines.append("  interrupted: re-run the same command to finish; recorded cases are kept")
        return "\n".join(lines)


def iter_inputs(paths: Sequence[str | os.PathLike[str]]) -> Iterator[Path]:
    """Files as given, and every file under a folder (recursive, sorted by path; hidden files left out)."""
    for p in map(Path, paths):
        if p.is_dir():
            for sub in sorted(x for x in p.rglob("*") if x.is_file()):
                if not any(part.startswith(".") for part in sub.relative_to(p).parts):
                    yield sub
        else:
            yield p


def _file_digest(path: Path) -> str | None:
    try:
        h = hashlib.sha256()
        with open(path, "rb") as f:
            for chunk in iter(lambda: f.read(1 << 20), b""):
                h.update(chunk)
        return h.hexdigest()
    except OSError:
        return None


def _display_and_overlays(scan: Scan, maps: dict[str, np.ndarray]) -> tuple[bytes, dict[str, bytes]]:
    from casefile.sheet.colours import overlay, png_bytes

    display = png_bytes(scan.display)
    return display, {m: png_bytes(overlay(scan.display, arr)) for m, arr in maps.items()}


def digest_name(file_sha256: str | None) -> str:
    """What a record names an input by when its base name is withheld: ``sha256:`` + 16 hex digits."""
    return f"sha256:{file_sha256[:16]}" if file_sha256 else WITHHELD


def _withhold(text: str, path: Path, name: str) -> str:
    """``text`` with the input's path, base name and stem replaced by ``name`` (for failure reasons)."""
    for part in (str(path), path.name, path.stem):
        if len(part) >= 3:
            text = text.replace(part, name)
    return text


def record_failure(ledger: Ledger, path: str | os.PathLike[str], reason: str, *, stage: str,
                   loaded: LoadedModel | None = None, settings_hash: str | None = None,
                   by_digest: bool = False) -> Outcome:
    """Append a failed-attempt entry for an input that could not be recorded as a case.

    ``by_digest``: the entry names the file by its digest, and its name is taken out of ``reason``.
    """
    p = Path(path)
    file_sha256 = _file_digest(p) if p.is_file() else None
    name = p.name or str(p)
    stored_reason = reason
    if by_digest:
        name = digest_name(file_sha256)
        stored_reason = _withhold(reason, p, name)
    body: dict[str, Any] = {"attempted_at": utc_now(), "file_name": name, "file_sha256": file_sha256,
                            "stage": stage, "reason": stored_reason, "software": software_versions()}
    if loaded is not None:
        body["model"] = {"name": loaded.card["name"], "version": loaded.card["version"], "digest": loaded.digest}
        body["settings_digest"] = settings_hash
    entry = ledger.append("failed", body)
    return Outcome(str(path), "failed", seq=entry.seq, hash=entry.hash, reason=reason)


def explain_scan(scan: Scan, loaded: LoadedModel, settings: dict[str, Any], *, target: int | None = None,
                 source: str = "casefile") -> CaseRecord:
    """Run the model and the explanation methods on one scan and build its case record (no ledger)."""
    from casefile import explain

    x = loaded.preprocess(scan)
    roi = loaded.roi_mask(int(x.shape[2]), int(x.shape[3]))
    exp = explain.run(loaded.module, x, target=target, labels=loaded.labels, layer=settings["layer"],
                      methods=settings["methods"], settings=settings["explain"], roi=roi)
    display, overlays = _display_and_overlays(scan, exp.maps)
    return build(scan, loaded, exp, settings=settings, recorded_at=utc_now(), display_png=display,
                 overlays=overlays, source=source)


def explain_one(ledger: Ledger, path: str | os.PathLike[str], loaded: LoadedModel, run: RunSettings | None = None,
                *, key: str | None = None, sheet_dir: str | os.PathLike[str] | None = None,
                target: int | None = None, settings: dict[str, Any] | None = None) -> Outcome:
    """One input end to end. The case and its blobs are appended in one transaction, or not at all.

    ``settings`` is ``preflight(loaded, run)`` when the caller has it already (a batch checks once);
    otherwise the run is checked here, before anything is read or written.
    """
    from casefile.imaging import load

    run = (run or RunSettings()).with_limits()
    settings = settings if settings is not None else preflight(loaded, run)
    by_digest = run.names_by_digest(loaded)
    try:
        scan = load(path, frame=run.frame, key=key, window=loaded.card["windowing"], uid_policy=run.uid_policy,
                    max_pixels=run.max_pixels, max_file_pixels=run.max_file_pixels)
    except CasefileError as exc:
        return record_failure(ledger, path, str(exc), stage="load", loaded=loaded,
                              settings_hash=settings_digest(settings), by_digest=by_digest)
    return _record_scan(ledger, str(path), scan, loaded, settings, target=target, sheet_dir=sheet_dir,
                        by_digest=by_digest)


def _skipped(ledger: Ledger, name: str, case_id: str, sheet_dir: str | os.PathLike[str] | None) -> Outcome:
    entry = ledger.case(case_id).entry
    out = Outcome(name, "skipped", case_id, entry.seq, entry.hash, body=entry.body)
    if sheet_dir is not None:  # a re-run also fills in a sheet that is missing
        sheet = Path(sheet_dir) / f"{case_id}.pdf"
        out.sheet = str(sheet if sheet.exists() else write_sheet(ledger, case_id, sheet_dir))
    return out


def _record_scan(ledger: Ledger, name: str, scan: Scan, loaded: LoadedModel, settings: dict[str, Any], *,
                 target: int | None, sheet_dir: str | os.PathLike[str] | None, by_digest: bool = False) -> Outcome:
    """A loaded scan: skip it when this run is recorded already, else explain, append and draw its sheet."""
    s_hash = settings_digest(settings)
    existing = ledger.find_case_id(scan.file_sha256, scan.frame, loaded.digest, s_hash)
    if existing:
        return _skipped(ledger, name, existing, sheet_dir)
    base = Path(name).name
    if by_digest:
        base = digest_name(scan.file_sha256)
        scan = replace(scan, file_name=base)

    def failed(reason: str, stage: str) -> Outcome:
        return record_failure(ledger, name, reason, stage=stage, loaded=loaded, settings_hash=s_hash,
                              by_digest=by_digest)

    try:
        rec = explain_scan(scan, loaded, settings, target=target,
                           source="caller" if target is not None else "casefile")
    except CasefileError as exc:
        return failed(str(exc), "explain")
    except (RuntimeError, ValueError) as exc:  # torch refuses something about this model or input
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        return failed(f"{base}: the explanation could not be computed: {first}", "explain")
    try:
        entry = ledger.append("case", rec.body, blobs=rec.blobs)
    except ValidationError as exc:
        if isinstance(exc, DuplicateCaseError):  # another process recorded it a moment ago
            return _skipped(ledger, name, rec.case_id, sheet_dir)
        return failed(f"{base}: the case record was refused: {exc}", "record")
    out = Outcome(name, "recorded", rec.case_id, entry.seq, entry.hash, body=entry.body)
    if sheet_dir is not None:
        out.sheet = str(write_sheet(ledger, rec.case_id, sheet_dir))
    return out


def write_sheet(ledger: Ledger, case_id: str, folder: str | os.PathLike[str] | None = None, *,
                path: str | os.PathLike[str] | None = None, page_size: str = "A4",
                fixed_time: str | None = None) -> Path:
    """Render the case sheet to ``path``, or to ``folder``/<case_id>.pdf; written whole, then renamed into
    place, so a reader never sees half a PDF."""
    from casefile.sheet import sheet_for_case

    target = Path(path) if path is not None else Path(folder or ".") / f"{case_id}.pdf"
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"{target.parent}: cannot create the sheet folder ({exc.strerror or exc})") from None
    return write_atomic(target, sheet_for_case(ledger, case_id, page_size=page_size, fixed_time=fixed_time))


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


def explain_batch(ledger: Ledger, inputs: Sequence[str | os.PathLike[str]], loaded: LoadedModel,
                  run: RunSettings | None = None, *, key: str | None = None,
                  sheet_dir: str | os.PathLike[str] | None = None, progress: bool = True,
                  on_outcome: Callable[[Outcome], None] | None = None) -> BatchSummary:
    """Every input in order; bad inputs are recorded as failed attempts and the batch goes on.

    Everything that can be refused for the whole run (settings, missing paths) is refused first,
    before any entry is written. ``on_outcome`` is called after each input; text it prints with
    ``say`` goes above the progress bar.
    """
    from tqdm import tqdm

    run = (run or RunSettings()).with_limits()
    settings = preflight(loaded, run)
    check_inputs(inputs)
    files = list(iter_inputs(inputs))
    summary = BatchSummary()
    bar = tqdm(files, desc="explain", unit="case", file=sys.stderr, disable=not progress, dynamic_ncols=True)
    try:
        for path in bar:
            out = explain_one(ledger, path, loaded, run, key=key, sheet_dir=sheet_dir, settings=settings)
            summary.outcomes.append(out)
            if out.outcome == "recorded":
                summary.recorded += 1
            elif out.outcome == "skipped":
                summary.skipped += 1
            else:
                summary.failed.append((str(path), out.reason or "unknown"))
            if on_outcome:
                on_outcome(out)
    except KeyboardInterrupt:
        summary.interrupted = True
    finally:
        bar.close()
    return summary


def say(line: str) -> None:
    """Print one line on stderr above any progress bar (the bar is redrawn under it, never torn)."""
    from tqdm import tqdm

    tqdm.write(line, file=sys.stderr)


def record_case(ledger: Ledger | str, model: LoadedModel, input: str | os.PathLike[str] | Scan, *,
                prediction: int | str | None = None, run: RunSettings | None = None,
                key: str | None = None) -> Outcome:
    """Wrap an inference you already run: record ``input`` (a path or a Scan) with ``model``.

    ``model`` is a LoadedModel (``casefile.models.load_model``). ``prediction`` is the label (or
    index) your service reported; the explanation is then computed for that class and the record says
    the result came from the caller. Returns the Outcome with the case id, seq and hash.
    """
    led = Ledger(ledger) if isinstance(ledger, str) else ledger
    target = None
    if prediction is not None:
        if isinstance(prediction, str):
            if prediction not in model.labels:
                raise InputError(f"prediction {prediction!r} is not one of the card's labels {model.labels}")
            target = model.labels.index(prediction)
        else:
            target = int(prediction)
            if not 0 <= target < len(model.labels):
                raise InputError(f"prediction index {target} is outside 0..{len(model.labels) - 1}")
    if isinstance(input, str | os.PathLike):
        return explain_one(led, input, model, run, key=key, target=target)
    run = run or RunSettings()
    settings = preflight(model, run)
    return _record_scan(led, input.file_name, input, model, settings, target=target, sheet_dir=None,
                        by_digest=run.names_by_digest(model))
