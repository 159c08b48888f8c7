"""File → scan → model → explanation → record → ledger → sheet, for one input and for a batch (resumable)."""

from __future__ import annotations

import os
import sys
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

from casefile.errors import (
    CasefileError,
    DuplicateCaseError,
    InputError,
    OutputError,
    ValidationError,
    one_line,
)
from casefile.files import sha256_file, write_atomic
from casefile.ledger import Ledger, utc_now
from casefile.record import CaseRecord, build, settings_digest
from casefile.runs import (
    DEFAULT_METHODS,
    NAME_POLICIES,
    NamePolicy,
    RunSettings,
    check_inputs,
    check_occlusion_grid,
    preflight,
)
from casefile.software import software_versions

if TYPE_CHECKING:  # types only; the heavy rooms are imported where they are first needed
    import numpy as np

    from casefile.imaging import Scan
    from casefile.models import LoadedModel


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
        return sha256_file(path)
    except OSError:
        return None


def _display_and_overlays(scan: Scan, maps: dict[str, np.ndarray]) -> tuple[bytes, dict[str, bytes]]:
    from casefile.sheet.colours import overlay, png_bytes

    display = png_bytes(scan.display)
    return display, {m: png_bytes(overlay(scan.display, arr)) for m, arr in maps.items()}


WITHHELD = "(name withheld)"
__all__ = ["DEFAULT_METHODS", "NAME_POLICIES", "BatchSummary", "NamePolicy", "Outcome", "RunSettings",
           "check_inputs", "check_occlusion_grid", "digest_name", "explain_batch", "explain_one", "explain_scan",
           "preflight", "record_case", "record_failure", "say", "write_sheet"]


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
        return failed(f"{base}: the explanation could not be computed: {one_line(exc)}", "explain")
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
