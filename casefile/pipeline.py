"""File → scan → model → explanation → record → ledger → sheet, for one input and for a batch (resumable)."""

from __future__ import annotations

import hashlib
import os
import sys
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from casefile.errors import (
    CasefileError,
    DuplicateCaseError,
    ExplainError,
    InputError,
    OutputError,
    ValidationError,
)
from casefile.files import write_atomic
from casefile.ledger import Ledger, utc_now
from casefile.record import CaseRecord, build, settings_digest
from casefile.software import software_versions

DEFAULT_METHODS = ("gradcam", "occlusion", "gradient")


@dataclass(frozen=True)
class RunSettings:
    """What a run may vary. Together with the input and model digests it decides whether a case is new.

    ``patch``/``stride`` of None take about a seventh of the smaller model-input side (32 and 16 on a
    224-pixel input, the explain room's defaults) so small models get a useful occlusion grid too.
    ``max_pixels``/``max_file_pixels`` of None take the site settings' input size limits
    (casefile.imaging.limits). They decide only whether an input is read at all, so they are not part
    of the stored settings: a case recorded under one limit is the same case under another.
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

    def with_limits(self) -> RunSettings:
        """These settings with the input size limits filled in from the site settings (read once, here,
        so that a malformed site file is refused before anything is recorded)."""
        from casefile.imaging import resolve_limits

        limits = resolve_limits(self.max_pixels, self.max_file_pixels)
        return replace(self, max_pixels=limits.max_pixels, max_file_pixels=limits.max_file_pixels)

    def resolve(self, loaded: Any) -> dict[str, Any]:
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

    def text(self) -> str:
        lines = [f"recorded {self.recorded}, skipped as already recorded {self.skipped}, failed {len(self.failed)}"]
        lines += [f"  failed: {name}: {why}" for name, why in self.failed]
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


def _display_and_overlays(scan: Any, maps: dict[str, Any]) -> tuple[bytes, dict[str, bytes]]:
    from casefile.sheet.colours import overlay, png_bytes

    display = png_bytes(scan.display)
    return display, {m: png_bytes(overlay(scan.display, arr)) for m, arr in maps.items()}


def record_failure(ledger: Ledger, path: str | os.PathLike[str], reason: str, *, stage: str,
                   loaded: Any = None, settings_hash: str | None = None) -> Outcome:
    """Append a failed-attempt entry for an input that could not be recorded as a case."""
    p = Path(path)
    body: dict[str, Any] = {"attempted_at": utc_now(), "file_name": p.name or str(p),
                            "file_sha256": _file_digest(p) if p.is_file() else None,
                            "stage": stage, "reason": reason, "software": software_versions()}
    if loaded is not None:
        body["model"] = {"name": loaded.card["name"], "version": loaded.card["version"], "digest": loaded.digest}
        body["settings_digest"] = settings_hash
    entry = ledger.append("failed", body)
    return Outcome(str(path), "failed", seq=entry.seq, hash=entry.hash, reason=reason)


def explain_scan(scan: Any, loaded: Any, settings: dict[str, Any], *, target: int | None = None,
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


def explain_one(ledger: Ledger, path: str | os.PathLike[str], loaded: Any, run: RunSettings | None = None,
                *, key: str | None = None, sheet_dir: str | os.PathLike[str] | None = None,
                target: int | None = None, settings: dict[str, Any] | None = None) -> Outcome:
    """One input end to end. The case and its blobs are appended in one transaction, or not at all.

    ``settings`` is ``run.resolve(loaded)`` when the caller has it already (a batch resolves it once).
    """
    from casefile.imaging import load

    run = (run or RunSettings()).with_limits()
    settings = settings if settings is not None else run.resolve(loaded)
    try:
        scan = load(path, frame=run.frame, key=key, window=loaded.card["windowing"], uid_policy=run.uid_policy,
                    max_pixels=run.max_pixels, max_file_pixels=run.max_file_pixels)
    except CasefileError as exc:
        return record_failure(ledger, path, str(exc), stage="load", loaded=loaded,
                              settings_hash=settings_digest(settings))
    return _record_scan(ledger, str(path), scan, loaded, settings, target=target, sheet_dir=sheet_dir)


def _skipped(ledger: Ledger, name: str, case_id: str, sheet_dir: str | os.PathLike[str] | None) -> Outcome:
    entry = ledger.case(case_id).entry
    out = Outcome(name, "skipped", case_id, entry.seq, entry.hash, body=entry.body)
    if sheet_dir is not None:  # a re-run also fills in a sheet that is missing
        sheet = Path(sheet_dir) / f"{case_id}.pdf"
        out.sheet = str(sheet if sheet.exists() else write_sheet(ledger, case_id, sheet_dir))
    return out


def _record_scan(ledger: Ledger, name: str, scan: Any, loaded: Any, settings: dict[str, Any], *,
                 target: int | None, sheet_dir: str | os.PathLike[str] | None) -> Outcome:
    """A loaded scan: skip it when this run is recorded already, else explain, append and draw its sheet."""
    s_hash = settings_digest(settings)
    existing = ledger.find_case_id(scan.file_sha256, scan.frame, loaded.digest, s_hash)
    if existing:
        return _skipped(ledger, name, existing, sheet_dir)
    base = Path(name).name
    try:
        rec = explain_scan(scan, loaded, settings, target=target,
                           source="caller" if target is not None else "casefile")
    except CasefileError as exc:
        return record_failure(ledger, name, str(exc), stage="explain", loaded=loaded, settings_hash=s_hash)
    except (RuntimeError, ValueError) as exc:  # torch refuses something about this model or input
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        reason = f"{base}: the explanation could not be computed: {first}"
        return record_failure(ledger, name, reason, stage="explain", loaded=loaded, settings_hash=s_hash)
    try:
        entry = ledger.append("case", rec.body, blobs=rec.blobs)
    except ValidationError as exc:
        if isinstance(exc, DuplicateCaseError):  # another process recorded it a moment ago
            return _skipped(ledger, name, rec.case_id, sheet_dir)
        reason = f"{base}: the case record was refused: {exc}"
        return record_failure(ledger, name, reason, stage="record", loaded=loaded, settings_hash=s_hash)
    out = Outcome(name, "recorded", rec.case_id, entry.seq, entry.hash, body=entry.body)
    if sheet_dir is not None:
        out.sheet = str(write_sheet(ledger, rec.case_id, sheet_dir))
    return out


def write_sheet(ledger: Ledger, case_id: str, folder: str | os.PathLike[str] | None = None, *,
                path: str | os.PathLike[str] | None = None, **opts: Any) -> Path:
    """Render the case sheet to ``path``, or to ``folder``/<case_id>.pdf; written whole, then renamed into
    place, so a reader never sees half a PDF."""
    from casefile.sheet import sheet_for_case

    target = Path(path) if path is not None else Path(folder or ".") / f"{case_id}.pdf"
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"{target.parent}: cannot create the sheet folder ({exc.strerror or exc})") from None
    return write_atomic(target, sheet_for_case(ledger, case_id, **opts))


def preflight(loaded: Any, run: RunSettings) -> dict[str, Any]:
    """Refuse, before any input is touched, a run that cannot work for this model at all; return the
    resolved settings (unknown explanation settings fail here, once, not per input)."""
    from casefile.explain.gradcam import hookable_layer

    settings = run.resolve(loaded)
    if "gradcam" in run.methods:
        try:
            hookable_layer(loaded.module, settings["layer"])
        except ExplainError as exc:
            raise ExplainError(f"{loaded.source.get('file_name', 'model')}: {exc} "
                               "(or choose --methods occlusion,gradient)") from None
    return settings


def explain_batch(ledger: Ledger, inputs: Sequence[str | os.PathLike[str]], loaded: Any,
                  run: RunSettings | None = None, *, key: str | None = None,
                  sheet_dir: str | os.PathLike[str] | None = None, progress: bool = True,
                  on_outcome: Callable[[Outcome], None] | None = None) -> BatchSummary:
    """Every input in order; bad inputs are recorded as failed attempts and the batch goes on."""
    from tqdm import tqdm

    run = (run or RunSettings()).with_limits()
    settings = preflight(loaded, run)
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


def record_case(ledger: Ledger | str, model: Any, input: Any, *, prediction: int | str | None = None,
                run: RunSettings | None = None, key: str | None = None) -> Outcome:
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
    settings = (run or RunSettings()).resolve(model)
    return _record_scan(led, input.file_name, input, model, settings, target=target, sheet_dir=None)
