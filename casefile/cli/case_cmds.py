"""Commands that make and show case records: explain, sheet, export, demo."""

from __future__ import annotations

import argparse
import sys
from typing import TYPE_CHECKING

from casefile.cli.common import (
    CASE_ID_HELP,
    command,
    err,
    jsonl,
    non_negative_int,
    open_ledger,
    positive_float,
    positive_int,
    store,
)
from casefile.runs import DEFAULT_METHODS, NAME_POLICIES

if TYPE_CHECKING:
    from casefile.pipeline import Outcome, RunSettings

OCCLUSION_MODES = ("auto", "incremental", "batched", "truncated", "coarse-to-fine")  # explain.occlusion.MODES
METHOD_NAMES = DEFAULT_METHODS  # casefile.explain.METHODS, without importing torch; checked equal by a test


def method_list(text: str) -> tuple[str, ...]:
    """``gradcam,occlusion`` → ("gradcam", "occlusion"); an unknown or empty name is a usage error."""
    names = tuple(m.strip() for m in text.split(","))
    unknown = [m for m in names if m not in METHOD_NAMES]
    if unknown or not names:
        shown = ", ".join(repr(m) for m in unknown) or "none"
        raise argparse.ArgumentTypeError(f"unknown method {shown}; choose from {', '.join(METHOD_NAMES)}")
    return tuple(dict.fromkeys(names))


def _fill(text: str) -> float | str:
    try:
        return float(text)
    except ValueError:
        if text in ("mean", "blur"):
            return text
        raise argparse.ArgumentTypeError(f"{text!r} is not a number, 'mean' or 'blur'") from None


def _run_settings(args: argparse.Namespace) -> RunSettings:
    from casefile.pipeline import RunSettings

    return RunSettings(methods=args.methods, layer=args.layer, patch=args.patch, stride=args.stride,
                       fill=args.fill, occlusion_mode=args.occlusion_mode, fidelity=args.fidelity,
                       frame=args.frame, uid_policy=args.uid_policy, max_pixels=args.max_pixels,
                       max_file_pixels=args.max_file_pixels, name_policy=args.name_policy)


def cmd_explain(args: argparse.Namespace) -> int:
    from casefile.models import load_model
    from casefile.pipeline import check_inputs, explain_batch, preflight, say

    run = _run_settings(args)
    check_inputs(args.inputs)
    loaded = load_model(args.model, args.card)
    preflight(loaded, run)  # every refusal for the whole run, before the ledger is even opened
    led = open_ledger(args, create=True)

    def show(out: Outcome) -> None:
        if args.json:
            jsonl(out.json_line())
        if out.outcome == "failed":
            say(out.line())  # on stderr above the progress bar, once, naming the path once

    if args.workers:
        from casefile.workers import explain_parallel

        led.close()
        summary = explain_parallel(store(args), args.inputs, args.model, args.card, run, loaded=loaded,
                                   workers=args.workers,
                                   key=args.site_key, sheet_dir=args.sheets, timeout=args.claim_timeout,
                                   on_outcome=show)
    else:
        summary = explain_batch(led, args.inputs, loaded, run, key=args.site_key,
                                sheet_dir=args.sheets, progress=not args.quiet and sys.stderr.isatty(),
                                on_outcome=show)
    err(summary.text(list_failures=False))
    if summary.interrupted:
        return 130
    return 1 if summary.failed else 0


def cmd_sheet(args: argparse.Namespace) -> int:
    from casefile.pipeline import write_sheet

    led = open_ledger(args)
    for cid in args.case_ids:
        print(write_sheet(led, cid, args.dir, path=args.output, page_size=args.page_size))
    return 0


def _sheet_usage(args: argparse.Namespace) -> str | None:
    if args.output and (len(args.case_ids) > 1 or args.dir):
        return "-o names one file; use --dir for several cases"
    return None


def cmd_export(args: argparse.Namespace) -> int:
    from casefile.exchange import EMPTY_PATIENT, encapsulated_pdf_for_case, export_case, patient_from, push
    from casefile.sheet import case_inputs, render_sheet

    led = open_ledger(args)
    inputs = case_inputs(led, args.case_id)
    case = inputs.pop("case")
    patient = patient_from(args.patient_from, case) if args.patient_from else None  # refused before any write
    module = patient.attributes if patient else None
    pdf = render_sheet(case, **inputs)
    if args.dicom:
        out = export_case(case, pdf, dicom_path=args.dicom, entry_hash=inputs["entry_hash"], patient_module=module)
        if out.reason:
            err(f"casefile export: {args.case_id}: {out.reason}; the PDF was written to {out.pdf_path}")
            return 1
        err(f"casefile export: {patient.words() if patient else EMPTY_PATIENT}")
        print(out.dicom_path)
        return 0
    host, _, port = args.pacs.rpartition(":")
    ds = encapsulated_pdf_for_case(case, pdf, entry_hash=inputs["entry_hash"], patient_module=module)
    err(f"casefile export: {patient.words() if patient else EMPTY_PATIENT}")
    for status in push([ds], host, int(port), args.called_aet, calling_aet=args.calling_aet):
        print(f"{status.meaning}: SOP Instance {status.sop_instance_uid} at {args.called_aet}@{args.pacs}")
    return 0


def _export_usage(args: argparse.Namespace) -> str | None:
    if args.pacs:
        host, _, port = args.pacs.rpartition(":")
        if not host or not port.isdigit() or not 0 < int(port) < 65536:
            return f"--pacs {args.pacs!r}: expected HOST:PORT with a port from 1 to 65535"
    return None


def cmd_demo(args: argparse.Namespace) -> int:
    from casefile.demo import run_demo

    return run_demo(args.dir)


def register(sub: argparse._SubParsersAction) -> None:
    sp = command(sub, "explain", cmd_explain, "explain and record each input (files or folders); re-running "
                 "skips inputs already recorded with the same model and settings")
    sp.add_argument("--model", required=True, metavar="FILE",
                    help="a state-dict file for the card's entry_point, a torch.export archive (.pt2), "
                         "a TorchScript file (no Grad-CAM), or package.module:factory (card's weights)")
    sp.add_argument("--card", required=True, metavar="FILE", help="the model card (JSON)")
    sp.add_argument("--methods", default=METHOD_NAMES, type=method_list, metavar="LIST",
                    help="comma-separated: gradcam, occlusion, gradient (default all three)")
    sp.add_argument("--layer", metavar="NAME", help="Grad-CAM layer (default: the card's)")
    sp.add_argument("--patch", type=positive_int, metavar="N", help="occlusion patch size in model-input "
                    "pixels (default: a seventh of the smaller input side, 32 on a 224-pixel input)")
    sp.add_argument("--stride", type=positive_int, metavar="N", help="occlusion stride (default: half the patch)")
    sp.add_argument("--fill", metavar="V", type=_fill, help="occlusion fill: a number (default 0, the "
                    "normalised mean), 'mean' or 'blur'")
    sp.add_argument("--occlusion-mode", choices=OCCLUSION_MODES,
                    help="how occlusion is computed: auto (default; incremental for a model of 100 million "
                         "multiply-adds per image or more, else batched), incremental (exact, each covered image "
                         "as a change to one cached run), batched (exact, one forward pass per position), or the "
                         "approximate truncated and coarse-to-fine, recorded and shown as approximate")
    sp.add_argument("--fidelity", type=float, metavar="F",
                    help="for an approximate --occlusion-mode, how much is computed (above 0, at most 1): the "
                         "share of each map kept around the patch (truncated, default 0.5) or of the finer "
                         "positions computed (coarse-to-fine, default 0.25)")
    sp.add_argument("--frame", type=non_negative_int, metavar="N",
                    help="frame of a multi-frame DICOM file (0-based)")
    sp.add_argument("--uid-policy", choices=["keep-uids", "drop-uids"], default="keep-uids",
                    help="keep the Study/Series/SOP Instance UIDs (default) or drop them")
    sp.add_argument("--site-key", metavar="FILE", help="site key for pseudonyms (default $CASEFILE_SITE_KEY "
                    "or ~/.config/casefile/site.key, created on first use)")
    sp.add_argument("--max-pixels", type=positive_int, metavar="N", help="refuse inputs whose header declares "
                    "more than N pixels per frame (default: site settings, else 100000000)")
    sp.add_argument("--max-file-pixels", type=positive_int, metavar="N", help="refuse inputs whose header "
                    "declares more than N values (pixels x samples x frames) per file (default: site settings, "
                    "else 400000000)")
    sp.add_argument("--name-policy", choices=NAME_POLICIES, default=None,
                    help="how the record names each input: base-name (the file's name without its folder) or "
                         "digest ('sha256:' and 16 hex digits of the file's SHA-256, for files named after "
                         "patients). Default: the card's record_file_name (false means digest), else base-name; "
                         "digest wins when either asks for it")
    sp.add_argument("--workers", type=positive_int, metavar="N",
                    help="explain with N processes, each with its share of the cores; the inputs are claimed "
                         "through the ledger's database, so several machines can run this against one "
                         "PostgreSQL ledger over one shared listing and no input is explained twice")
    sp.add_argument("--claim-timeout", type=positive_float, default=600.0, metavar="SECONDS",
                    help="with --workers: take over an input whose worker has been silent this long "
                         "(default 600; keep it above the longest time one input takes)")
    sp.add_argument("--sheets", metavar="DIR", help="also render each new case's sheet into DIR")
    sp.add_argument("-q", "--quiet", action="store_true",
                    help="no progress bar (there is none when stderr is not a terminal)")
    sp.add_argument("inputs", nargs="+", metavar="INPUT", help="image files or folders (searched recursively)")

    sp = command(sub, "sheet", cmd_sheet, "render the PDF case sheet of one or more cases", json_=False,
                 check=_sheet_usage)
    sp.add_argument("case_ids", nargs="+", metavar="CASE_ID", help=CASE_ID_HELP)
    sp.add_argument("-o", "--output", metavar="FILE", help="output file for one case (default CASE_ID.pdf)")
    sp.add_argument("--dir", metavar="DIR", help="write each sheet as DIR/CASE_ID.pdf")
    sp.add_argument("--page-size", choices=["A4", "letter"], default="A4")

    sp = command(sub, "export", cmd_export, "wrap a case sheet as a DICOM Encapsulated PDF, to a file or an "
                 "archive", json_=False, check=_export_usage)
    sp.add_argument("case_id", metavar="CASE_ID", help=CASE_ID_HELP)
    where = sp.add_mutually_exclusive_group(required=True)
    where.add_argument("--dicom", metavar="FILE.dcm", help="write the DICOM object here")
    where.add_argument("--pacs", metavar="HOST:PORT", help="send it to this archive with C-STORE")
    sp.add_argument("--called-aet", default="ANY-SCP", help="the archive's AE title (with --pacs)")
    sp.add_argument("--calling-aet", default="CASEFILE", help="our AE title (with --pacs)")
    sp.add_argument("--patient-from", metavar="SOURCE.dcm",
                    help="copy the Patient module (name, ID, birth date, sex ...) from the case's own source file "
                         "into the exported object, so the archive files it with its study; read at export time "
                         "only, never recorded in the ledger. Refused unless the file's SHA-256 (or, with a note, "
                         "its SOP Instance UID) matches the case. Without it Patient Name and ID are empty")

    sp = command(sub, "demo", cmd_demo, "run the whole job on the synthetic scenario", json_=False)
    sp.add_argument("--dir", default="demo_out", help="where to write the demo (default ./demo_out)")

