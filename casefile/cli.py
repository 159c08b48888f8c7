"""The command line: parse arguments, call one library function, print the result. No logic here."""

from __future__ import annotations

import argparse
import json
import os
import sys
from collections.abc import Callable, Sequence
from typing import Any

from casefile import __version__
from casefile.errors import CasefileError

DEFAULT_STORE = "casefile.db"


def _store(args: argparse.Namespace) -> str:
    return args.store or os.environ.get("CASEFILE_STORE") or DEFAULT_STORE


def _ledger(args: argparse.Namespace, create: bool = False) -> Any:
    from casefile.ledger import Ledger

    return Ledger(_store(args), create=create)


def _jsonl(obj: Any) -> None:
    sys.stdout.write(json.dumps(obj, ensure_ascii=False, sort_keys=True) + "\n")


def _err(msg: str) -> None:
    sys.stderr.write(msg + "\n")


# ---------------------------------------------------------------------------------------- commands
def cmd_init(args: argparse.Namespace) -> int:
    led = _ledger(args, create=True)
    seq, h = led.head()
    if args.json:
        _jsonl({"store": led.path, "head_seq": seq, "head_hash": h})
    else:
        print(f"ledger ready at {led.path} ({seq} entries)")
    return 0


def cmd_verify(args: argparse.Namespace) -> int:
    report = _ledger(args).verify(args.seal, public_key=args.public_key, strict=args.strict)
    if args.json:
        _jsonl(report.to_dict())
    else:
        print(report.summary())
        for note in report.notes:
            _err(f"note: {note}")
    return 0 if report.ok else 1


def cmd_seal(args: argparse.Namespace) -> int:
    from casefile.ledger import seal_file_bytes

    led = _ledger(args)
    entry = led.seal(args.key, note=args.note)
    data = seal_file_bytes(entry)
    if args.output:
        with open(args.output, "wb") as f:
            f.write(data)
    if args.json:
        _jsonl({"seq": entry.seq, "hash": entry.hash, **entry.body, "file": args.output})
    else:
        signed = "signed" if "signature" in entry.body else "unsigned"
        print(f"seal recorded as seq {entry.seq} ({signed}): {entry.body['tree_size']} entries, "
              f"Merkle root {entry.body['merkle_root']}")
        if args.output:
            print(f"seal file written to {args.output}; keep a copy outside this machine")
    return 0


def cmd_keygen(args: argparse.Namespace) -> int:
    from casefile.ledger import generate_key

    pub = generate_key(args.path)
    print(f"private key written to {args.path} (keep it off the ledger's machine); public key {pub}")
    return 0


def cmd_audit(args: argparse.Namespace) -> int:
    from casefile.audit import audit_rows

    rows = audit_rows(_ledger(args), kind=args.kind, model=args.model, label=args.label, status=args.status,
                      since=args.since, until=args.until)
    if args.csv:
        from casefile.audit import write_csv

        write_csv(rows, sys.stdout)
    elif args.json:
        for row in rows:
            _jsonl(row)
    else:
        from casefile.audit import format_table

        print(format_table(rows))
    return 0


def _run_settings(args: argparse.Namespace) -> Any:
    from casefile.pipeline import RunSettings

    methods = tuple(m.strip() for m in args.methods.split(",") if m.strip())
    fill: float | str | None = None
    if args.fill is not None:
        try:
            fill = float(args.fill)
        except ValueError:
            fill = args.fill
    return RunSettings(methods=methods, layer=args.layer, patch=args.patch, stride=args.stride, fill=fill,
                       frame=args.frame, uid_policy=args.uid_policy, max_pixels=args.max_pixels,
                       max_file_pixels=args.max_file_pixels)


def cmd_explain(args: argparse.Namespace) -> int:
    from casefile.models import load_model
    from casefile.pipeline import explain_batch

    loaded = load_model(args.model, args.card)
    led = _ledger(args, create=True)

    def show(out: Any) -> None:
        if args.json:
            _jsonl(out.json_line())
        elif out.outcome == "failed":
            _err(f"failed: {out.input}: {out.reason}")

    summary = explain_batch(led, args.inputs, loaded, _run_settings(args), key=args.site_key,
                            sheet_dir=args.sheets, progress=not args.quiet, on_outcome=show)
    _err(summary.text())
    if summary.interrupted:
        return 130
    return 1 if summary.failed else 0


def cmd_sheet(args: argparse.Namespace) -> int:
    from casefile.pipeline import write_sheet

    led = _ledger(args)
    if args.output and (len(args.case_ids) > 1 or args.dir):
        raise CasefileError("sheet: -o names one file; use --dir for several cases")
    for cid in args.case_ids:
        print(write_sheet(led, cid, args.dir, path=args.output, page_size=args.page_size))
    return 0


def cmd_export(args: argparse.Namespace) -> int:
    from casefile.exchange import export_case
    from casefile.sheet import case_inputs, render_sheet

    led = _ledger(args)
    inputs = case_inputs(led, args.case_id)
    case = inputs.pop("case")
    pdf = render_sheet(case, **inputs)
    if args.dicom:
        out = export_case(case, pdf, dicom_path=args.dicom, entry_hash=inputs["entry_hash"])
        if out.reason:
            _err(f"casefile export: {args.case_id}: {out.reason}; the PDF was written to {out.pdf_path}")
            return 1
        print(out.dicom_path)
        return 0
    from casefile.exchange import encapsulated_pdf_for_case, push

    host, _, port = args.pacs.rpartition(":")
    if not host or not port.isdigit():
        raise CasefileError(f"--pacs {args.pacs!r}: expected HOST:PORT")
    ds = encapsulated_pdf_for_case(case, pdf, entry_hash=inputs["entry_hash"])
    for status in push([ds], host, int(port), args.called_aet, calling_aet=args.calling_aet):
        print(status)
    return 0


def _filters(args: argparse.Namespace) -> dict[str, str]:
    return {k: v for k in ("model", "label", "status", "since", "until") if (v := getattr(args, k, None))}


def cmd_sample(args: argparse.Namespace) -> int:
    from casefile.review import describe_draw, draw

    entry = draw(_ledger(args), args.plan, size=args.size, aql=args.aql, level=args.level, seed=args.seed,
                 filters=_filters(args), allocation=args.allocation, strata=args.strata, share=args.share)
    if args.json:
        _jsonl({"seq": entry.seq, "hash": entry.hash, **entry.body})
    else:
        print(describe_draw(entry.body))
    return 0


def cmd_review(args: argparse.Namespace) -> int:
    from casefile.review import record_review

    entry = record_review(_ledger(args), args.case_id, reader=args.reader, verdict=args.verdict,
                          label=args.label, note=args.note)
    if args.json:
        _jsonl({"seq": entry.seq, "hash": entry.hash, **entry.body})
    else:
        print(f"review recorded as seq {entry.seq} ({entry.hash[:16]}…)")
    return 0


def cmd_stats(args: argparse.Namespace) -> int:
    from casefile.review import format_text, summarise

    summary = summarise(_ledger(args))
    if args.json:
        _jsonl(summary)
    else:
        print(format_text(summary))
    return 0


def cmd_amend(args: argparse.Namespace) -> int:
    from casefile.audit import amend_case

    changes = {"label": args.label} if args.label else None
    entry = amend_case(_ledger(args), args.case_id, author=args.author, reason=args.reason, changes=changes)
    if args.json:
        _jsonl({"seq": entry.seq, "hash": entry.hash, **entry.body})
    else:
        print(f"amendment recorded as seq {entry.seq}; the original entry seq {entry.body['amends_seq']} is kept")
    return 0


def cmd_history(args: argparse.Namespace) -> int:
    from casefile.audit import format_history, history

    rows = history(_ledger(args), args.case_id)
    if args.json:
        for row in rows:
            _jsonl(row)
    else:
        print(format_history(rows))
    return 0


def cmd_demo(args: argparse.Namespace) -> int:
    from casefile.demo import run_demo

    return run_demo(args.dir)


# ---------------------------------------------------------------------------------------- parser
def _whole(text: str) -> int:
    """argparse type: a whole number of at least 1."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"expected a whole number of at least 1, got {value}")
    return value


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="casefile",
        description="Record image-classifier decisions with their explanations and sanity checks in an "
                    "append-only, tamper-evident ledger; render case sheets; audit, sample and verify. "
                    "An explanation shows what influenced the model, not whether it is right; decisions "
                    "rest with qualified staff.")
    p.add_argument("--version", action="version", version=f"casefile {__version__}")
    p.add_argument("--store", metavar="URL",
                   help="ledger: a SQLite path or SQLAlchemy URL (default $CASEFILE_STORE, else ./casefile.db)")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    def add(name: str, fn: Callable[[argparse.Namespace], int], help_: str, json_: bool = True) -> Any:
        sp = sub.add_parser(name, help=help_, description=help_)
        sp.set_defaults(func=fn)
        if json_:
            sp.add_argument("--json", action="store_true", help="one JSON object per line on stdout")
        return sp

    add("init", cmd_init, "create an empty ledger (safe to repeat)")

    sp = add("verify", cmd_verify, "check every hash, link, blob and query row; exit 1 naming the first bad seq")
    sp.add_argument("--seal", metavar="FILE", help="also prove the ledger still holds the history in this seal file")
    sp.add_argument("--public-key", metavar="FILE", help="trusted Ed25519 public key the seal must be signed with")
    sp.add_argument("--strict", action="store_true",
                    help="also re-check each body's canonical form and schema (slower)")

    sp = add("seal", cmd_seal, "record a seal (head hash + Merkle root) and export it to a file")
    sp.add_argument("--key", metavar="FILE", help="Ed25519 private key file to sign the seal with")
    sp.add_argument("-o", "--output", metavar="FILE", help="write the seal file here")
    sp.add_argument("--note", help="a short note stored in the seal")

    sp = add("keygen", cmd_keygen, "create an Ed25519 key pair for signing seals", json_=False)
    sp.add_argument("path", metavar="FILE", help="where to write the private key (public key: FILE.pub)")

    sp = add("audit", cmd_audit, "list recorded cases (or entries of one kind) with filters")
    sp.add_argument("--kind", help="list entries of this kind instead of cases (failed, review, draw, seal …)")
    sp.add_argument("--model", help="model name, name@version, or digest prefix")
    sp.add_argument("--label", help="predicted label")
    sp.add_argument("--status", choices=["pass", "warn", "fail", "not-run"], help="worst check outcome")
    sp.add_argument("--since", metavar="T", help="recorded at or after T (ISO 8601, UTC)")
    sp.add_argument("--until", metavar="T", help="recorded at or before T (ISO 8601, UTC)")
    sp.add_argument("--csv", action="store_true", help="CSV on stdout")

    sp = add("explain", cmd_explain, "explain and record each input (files or folders); re-running skips "
             "inputs already recorded with the same model and settings")
    sp.add_argument("--model", required=True, metavar="FILE",
                    help="a state-dict file for the card's entry_point, a torch.export archive (.pt2), "
                         "a TorchScript file (no Grad-CAM), or package.module:factory (card's weights)")
    sp.add_argument("--card", required=True, metavar="FILE", help="the model card (JSON)")
    sp.add_argument("--methods", default="gradcam,occlusion,gradient",
                    help="comma-separated: gradcam, occlusion, gradient (default all three)")
    sp.add_argument("--layer", metavar="NAME", help="Grad-CAM layer (default: the card's)")
    sp.add_argument("--patch", type=int, metavar="N", help="occlusion patch size in model-input pixels "
                    "(default: a seventh of the smaller input side, 32 on a 224-pixel input)")
    sp.add_argument("--stride", type=int, metavar="N", help="occlusion stride (default: half the patch)")
    sp.add_argument("--fill", metavar="V", help="occlusion fill: a number (default 0, the normalised mean), "
                    "'mean' or 'blur'")
    sp.add_argument("--frame", type=int, metavar="N", help="frame of a multi-frame DICOM file (0-based)")
    sp.add_argument("--uid-policy", choices=["keep-uids", "drop-uids"], default="keep-uids",
                    help="keep the Study/Series/SOP Instance UIDs (default) or drop them")
    sp.add_argument("--site-key", metavar="FILE", help="site key for pseudonyms (default $CASEFILE_SITE_KEY "
                    "or ~/.config/casefile/site.key, created on first use)")
    sp.add_argument("--max-pixels", type=_whole, metavar="N", help="refuse inputs whose header declares more "
                    "than N pixels per frame (default: site settings, else 100000000)")
    sp.add_argument("--max-file-pixels", type=_whole, metavar="N", help="refuse inputs whose header declares "
                    "more than N values (pixels x samples x frames) per file (default: site settings, else 400000000)")
    sp.add_argument("--sheets", metavar="DIR", help="also render each new case's sheet into DIR")
    sp.add_argument("-q", "--quiet", action="store_true", help="no progress bar")
    sp.add_argument("inputs", nargs="+", metavar="INPUT", help="image files or folders (searched recursively)")

    sp = add("sheet", cmd_sheet, "render the PDF case sheet of one or more cases", json_=False)
    sp.add_argument("case_ids", nargs="+", metavar="CASE_ID")
    sp.add_argument("-o", "--output", metavar="FILE", help="output file for one case (default CASE_ID.pdf)")
    sp.add_argument("--dir", metavar="DIR", help="write each sheet as DIR/CASE_ID.pdf")
    sp.add_argument("--page-size", choices=["A4", "letter"], default="A4")

    sp = add("export", cmd_export, "wrap a case sheet as a DICOM Encapsulated PDF, to a file or an archive",
             json_=False)
    sp.add_argument("case_id", metavar="CASE_ID")
    where = sp.add_mutually_exclusive_group(required=True)
    where.add_argument("--dicom", metavar="FILE.dcm", help="write the DICOM object here")
    where.add_argument("--pacs", metavar="HOST:PORT", help="send it to this archive with C-STORE")
    sp.add_argument("--called-aet", default="ANY-SCP", help="the archive's AE title (with --pacs)")
    sp.add_argument("--calling-aet", default="CASEFILE", help="our AE title (with --pacs)")

    sp = add("sample", cmd_sample, "draw cases for a second read with a sampling plan; the draw is recorded")
    sp.add_argument("--plan", required=True, choices=["random", "stratified", "risk", "lot"],
                    help="random: simple random sample; stratified: by label and/or status; risk: every flagged "
                         "case plus a share of the rest (weighted estimate); lot: ISO 2859-1 single sampling")
    sp.add_argument("--size", type=int, metavar="N", help="sample size (random, stratified, risk)")
    sp.add_argument("--aql", type=float, metavar="A", help="acceptable quality limit in %% (lot plan)")
    sp.add_argument("--level", choices=["I", "II", "III"], default="II", help="general inspection level (lot)")
    sp.add_argument("--seed", type=int, default=0, metavar="S", help="seed; the same seed redraws the same list")
    sp.add_argument("--allocation", choices=["proportional", "equal"], default="proportional",
                    help="stratified plan: sample in proportion to each stratum, or the same number from each")
    sp.add_argument("--strata", choices=["label", "status", "label+status"], default="label",
                    help="stratified plan: what defines a stratum")
    sp.add_argument("--share", type=float, metavar="P", help="risk plan: share of unflagged cases to draw")
    sp.add_argument("--model", help="population filter: model name, name@version or digest prefix")
    sp.add_argument("--label", help="population filter: predicted label")
    sp.add_argument("--since", metavar="T", help="population filter: recorded at or after T (UTC)")
    sp.add_argument("--until", metavar="T", help="population filter: recorded at or before T (UTC)")
    sp.add_argument("--status", choices=["pass", "warn", "fail", "not-run"], help="population filter: status")

    sp = add("review", cmd_review, "record a reader's verdict on a case")
    sp.add_argument("case_id", metavar="CASE_ID")
    sp.add_argument("--reader", required=True, metavar="ID")
    sp.add_argument("--verdict", required=True, choices=["agree", "disagree", "unsure"])
    sp.add_argument("--label", metavar="L", help="the reader's label")
    sp.add_argument("--note", metavar="TEXT")

    sp = add("history", cmd_history, "everything recorded about one case: the case, amendments, reviews")
    sp.add_argument("case_id", metavar="CASE_ID")

    sp = add("amend", cmd_amend, "record a correction to a case; the original entry stays visible")
    sp.add_argument("case_id", metavar="CASE_ID")
    sp.add_argument("--author", required=True, metavar="ID", help="who makes the correction")
    sp.add_argument("--reason", required=True, metavar="TEXT", help="why the record is corrected")
    sp.add_argument("--label", metavar="L", help="the corrected label, if that is the correction")

    add("stats", cmd_stats, "disagreement rates with intervals, kappa, confusion tables, lot decisions")

    sp = add("demo", cmd_demo, "run the whole job on the synthetic scenario", json_=False)
    sp.add_argument("--dir", default="demo_out", help="where to write the demo (default ./demo_out)")
    return p


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.func(args))
    except CasefileError as exc:
        _err(f"casefile {args.command}: {exc}")
        return 1
    except KeyboardInterrupt:
        _err(f"casefile {args.command}: interrupted; everything recorded so far is kept")
        return 130


if __name__ == "__main__":
    sys.exit(main())
