"""Commands for second reads: sample, review, adjudicate, stats."""

from __future__ import annotations

import argparse

from casefile.cli.common import (
    CASE_ID_HELP,
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
from casefile.review.lot import LEVELS
from casefile.review.plans import ALLOCATIONS, DEFAULT_MINIMUM, PLANS, STRATA
from casefile.review.readings import VERDICTS

PLAN_HELP = ("random: simple random sample (needs --size); stratified: by label, status or flag (needs --size); "
             "risk: every flagged case (a check sent it to a person) plus a simple random sample of the rest, at "
             "least --minimum of them, weighted estimate (needs --size or --share); "
             "lot: ISO 2859-1 single sampling (needs --aql)")


def cmd_sample(args: argparse.Namespace) -> int:
    from casefile.review import describe_draw, draw

    entry = draw(open_ledger(args), args.plan, size=args.size, aql=args.aql, level=args.level, seed=args.seed,
                 filters=case_filters(args), allocation=args.allocation, strata=args.strata, share=args.share,
                 minimum=args.minimum)
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
    if args.plan != "risk" and args.minimum != DEFAULT_MINIMUM:
        return f"--minimum goes with --plan risk, not --plan {args.plan}"
    return None


def cmd_review(args: argparse.Namespace) -> int:
    from casefile.cli.server_cmds import read_password
    from casefile.review import record_review
    from casefile.review.accounts import confirm_reader, needs_password

    ledger = open_ledger(args)
    if needs_password(ledger, args.reader):  # a reader with an account: nobody else writes in their name
        confirm_reader(ledger, args.reader, read_password(args.reader), f"review of {args.case_id}")
    entry = record_review(ledger, args.case_id, reader=args.reader, verdict=args.verdict,
                          label=args.label, note=args.note, amends=args.amends, draw_id=args.draw,
                          new_label=args.new_label)
    draw_id = entry.body.get("draw_id")
    print_entry(args, entry, f"review recorded as seq {entry.seq} ({entry.hash[:16]}…)"
                             + (f" for draw {draw_id}" if draw_id else ""))
    return 0


def cmd_adjudicate(args: argparse.Namespace) -> int:
    from casefile.review import record_adjudication

    entry = record_adjudication(open_ledger(args), args.case_id, adjudicator=args.by, label=args.label,
                                reason=args.reason, new_label=args.new_label, draw_id=args.draw)
    print_entry(args, entry, f"adjudication recorded as seq {entry.seq}: {entry.body['label']} "
                             f"(readings {', '.join(map(str, entry.body['readings']))})")
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
    sp.add_argument("--plan", required=True, choices=PLANS, help=PLAN_HELP)
    sp.add_argument("--size", type=positive_int, metavar="N", help="sample size (random, stratified, risk)")
    sp.add_argument("--aql", type=_aql, metavar="A", help="acceptable quality limit in %% (lot plan)")
    sp.add_argument("--level", choices=LEVELS, default="II", help="general inspection level (lot)")
    sp.add_argument("--seed", type=non_negative_int, default=0, metavar="S",
                    help="seed; the same seed redraws the same list")
    sp.add_argument("--allocation", choices=ALLOCATIONS, default="proportional",
                    help="stratified plan: sample in proportion to each stratum, or the same number from each")
    sp.add_argument("--strata", choices=STRATA, default="label",
                    help="stratified plan: what defines a stratum")
    sp.add_argument("--share", type=share, metavar="P", help="risk plan: share of unflagged cases to draw")
    sp.add_argument("--minimum", type=positive_int, default=DEFAULT_MINIMUM, metavar="N",
                    help=f"risk plan: draw at least N unflagged cases, or all of them (default {DEFAULT_MINIMUM}); "
                         "fewer reviewed than N gives bounds, not an estimate")
    add_case_filters(sp, "population filter")

    sp = command(sub, "review", cmd_review, "record a reader's verdict on a case, for one draw",
                 epilog="A reader reads a case once per draw; to correct a reading, pass --amends SEQ "
                        "(the seq printed when it was recorded, or shown by `casefile history CASE_ID`). "
                        "A reader with an account (`casefile reader add`) gives their password: typed at the "
                        "terminal, or as the first line of standard input.")
    sp.add_argument("case_id", metavar="CASE_ID", help=CASE_ID_HELP)
    sp.add_argument("--reader", required=True, metavar="ID", help="who read the case (a reader id of your site)")
    sp.add_argument("--verdict", required=True, choices=VERDICTS)
    sp.add_argument("--label", metavar="L", help="the reader's label; one of the model's labels unless --new-label")
    sp.add_argument("--new-label", action="store_true", help="the label is not one the model knows; recorded as such")
    sp.add_argument("--note", metavar="TEXT", help="the reader's note, kept with the reading")
    sp.add_argument("--amends", type=positive_int, metavar="SEQ", help="this corrects the reader's reading SEQ")
    sp.add_argument("--draw", metavar="DRAW_ID",
                    help="the draw this reading is for (default: the latest draw holding the case)")

    sp = command(sub, "adjudicate", cmd_adjudicate, "record a decision on a case where second readers disagree "
                 "with each other (refused when they do not)")
    sp.add_argument("case_id", metavar="CASE_ID", help=CASE_ID_HELP)
    sp.add_argument("--by", required=True, metavar="ID", help="who decides (not one of the readers in conflict)")
    sp.add_argument("--label", required=True, metavar="L",
                    help="the label decided; one of the model's labels unless --new-label")
    sp.add_argument("--new-label", action="store_true", help="the label is not one the model knows; recorded as such")
    sp.add_argument("--reason", required=True, metavar="TEXT", help="why this label was decided")
    sp.add_argument("--draw", metavar="DRAW_ID", help="judge the readings of this draw (default: each reader's latest)")

    command(sub, "stats", cmd_stats, "disagreement rates with intervals, kappa (model vs readers, reader pairs, "
            "Fleiss' for three or more), confusion tables, lot decisions, and the expected calibration error of "
            "the model's confidence against readers' agreement; each figure names its n")
