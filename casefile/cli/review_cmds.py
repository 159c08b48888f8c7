"""Commands for second reads: sample, review, stats."""

from __future__ import annotations

import argparse

from casefile.cli.common import (
    add_case_filters,
    case_filters,
    command,
    jsonl,
    non_negative_int,
    open_ledger,
    positive_int,
    print_entry,
    share,
)

PLAN_HELP = ("random: simple random sample (needs --size); stratified: by label and/or status (needs --size); "
             "risk: every flagged case plus a share of the rest, weighted estimate (needs --size or --share); "
             "lot: ISO 2859-1 single sampling (needs --aql)")


def cmd_sample(args: argparse.Namespace) -> int:
    from casefile.review import describe_draw, draw

    entry = draw(open_ledger(args), args.plan, size=args.size, aql=args.aql, level=args.level, seed=args.seed,
                 filters=case_filters(args), allocation=args.allocation, strata=args.strata, share=args.share)
    print_entry(args, entry, describe_draw(entry.body))
    return 0


def _sample_usage(args: argparse.Namespace) -> str | None:
    if args.plan in ("random", "stratified") and args.size is None:
        return f"--plan {args.plan} needs --size N"
    if args.plan == "lot" and args.aql is None:
        return "--plan lot needs --aql A (the acceptable quality limit in %)"
    if args.plan == "risk" and args.size is None and args.share is None:
        return "--plan risk needs --size N or --share P (the share of unflagged cases to draw)"
    if args.plan != "lot" and args.aql is not None:
        return f"--aql goes with --plan lot, not --plan {args.plan}"
    if args.plan == "lot" and args.size is not None:
        return "--plan lot takes its sample size from ISO 2859-1 (--aql, --level); leave out --size"
    return None


def cmd_review(args: argparse.Namespace) -> int:
    from casefile.review import record_review

    entry = record_review(open_ledger(args), args.case_id, reader=args.reader, verdict=args.verdict,
                          label=args.label, note=args.note)
    print_entry(args, entry, f"review recorded as seq {entry.seq} ({entry.hash[:16]}…)")
    return 0


def cmd_stats(args: argparse.Namespace) -> int:
    from casefile.review import format_text, summarise

    summary = summarise(open_ledger(args))
    if args.json:
        jsonl(summary)
    else:
        print(format_text(summary))
    return 0


def _aql(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if value <= 0:
        raise argparse.ArgumentTypeError(f"{text!r} must be above 0")
    return value


def register(sub: argparse._SubParsersAction) -> None:
    sp = command(sub, "sample", cmd_sample, "draw cases for a second read with a sampling plan; the draw is "
                 "recorded", check=_sample_usage)
    sp.add_argument("--plan", required=True, choices=["random", "stratified", "risk", "lot"], help=PLAN_HELP)
    sp.add_argument("--size", type=positive_int, metavar="N", help="sample size (random, stratified, risk)")
    sp.add_argument("--aql", type=_aql, metavar="A", help="acceptable quality limit in %% (lot plan)")
    sp.add_argument("--level", choices=["I", "II", "III"], default="II", help="general inspection level (lot)")
    sp.add_argument("--seed", type=non_negative_int, default=0, metavar="S",
                    help="seed; the same seed redraws the same list")
    sp.add_argument("--allocation", choices=["proportional", "equal"], default="proportional",
                    help="stratified plan: sample in proportion to each stratum, or the same number from each")
    sp.add_argument("--strata", choices=["label", "status", "label+status"], default="label",
                    help="stratified plan: what defines a stratum")
    sp.add_argument("--share", type=share, metavar="P", help="risk plan: share of unflagged cases to draw")
    add_case_filters(sp, "population filter")

    sp = command(sub, "review", cmd_review, "record a reader's verdict on a case")
    sp.add_argument("case_id", metavar="CASE_ID")
    sp.add_argument("--reader", required=True, metavar="ID")
    sp.add_argument("--verdict", required=True, choices=["agree", "disagree", "unsure"])
    sp.add_argument("--label", metavar="L", help="the reader's label")
    sp.add_argument("--note", metavar="TEXT")

    command(sub, "stats", cmd_stats, "disagreement rates with intervals, kappa, confusion tables, lot decisions")
