"""Commands an auditor uses on recorded cases: audit, history, amend."""

from __future__ import annotations

import argparse
import sys

from casefile.cli.common import (
    CASE_ID_HELP,
    add_case_filters,
    case_filters,
    command,
    open_ledger,
    print_entry,
    print_rows,
)


def _check_pair(text: str) -> tuple[str, str]:
    """Option type for --check NAME=OUTCOME: a bad pair is a usage error naming the checks or outcomes."""
    from casefile.audit import parse_check
    from casefile.errors import ValidationError

    try:
        return parse_check(text)
    except ValidationError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def cmd_audit(args: argparse.Namespace) -> int:
    from casefile.audit import audit_rows, format_table, write_csv

    flagged = None if args.flagged is None else args.flagged == "yes"
    rows = audit_rows(open_ledger(args), kind=args.kind, checks=args.checks or (), flagged=flagged,
                      **case_filters(args))
    if args.csv:
        write_csv(rows, sys.stdout)
    else:
        print_rows(args, rows, format_table)
    return 0


def _audit_usage(args: argparse.Namespace) -> str | None:
    if args.csv and args.json:
        return "choose one of --csv and --json"
    if args.kind and args.kind != "case" and (args.checks or args.flagged):
        return "--check and --flagged select cases; leave out --kind"
    return None


def cmd_history(args: argparse.Namespace) -> int:
    from casefile.audit import format_history, history

    print_rows(args, history(open_ledger(args), args.case_id), format_history)
    return 0


def cmd_amend(args: argparse.Namespace) -> int:
    from casefile.audit import amend_case

    changes = {"label": args.label} if args.label else None
    entry = amend_case(open_ledger(args), args.case_id, author=args.author, reason=args.reason, changes=changes,
                       new_label=args.new_label)
    print_entry(args, entry, f"amendment recorded as seq {entry.seq}; the original entry seq "
                             f"{entry.body['amends_seq']} is kept")
    return 0


def register(sub: argparse._SubParsersAction) -> None:
    sp = command(sub, "audit", cmd_audit, "list recorded cases (or entries of one kind) with filters; each case "
                 "row says which checks warned or failed and which flagged it", check=_audit_usage,
                 epilog="example: casefile audit --check region_focus=fail --since 2026-11-01 --csv")
    sp.add_argument("--kind", help="list entries of this kind instead of cases (failed, review, draw, seal …)")
    add_case_filters(sp)
    sp.add_argument("--check", action="append", type=_check_pair, metavar="NAME=OUTCOME", dest="checks",
                    help="only cases whose check NAME had OUTCOME (pass, warn, fail, not-run); repeat for several, "
                         "all must hold")
    sp.add_argument("--flagged", choices=["yes", "no"],
                    help="only cases a check sent to a person (yes) or only those it did not (no)")
    sp.add_argument("--csv", action="store_true", help="CSV on stdout, one check_<name> column per check")

    sp = command(sub, "history", cmd_history, "everything recorded about one case: the case and which checks "
                 "warned or failed, amendments, reviews, adjudications")
    sp.add_argument("case_id", metavar="CASE_ID", help=CASE_ID_HELP)

    sp = command(sub, "amend", cmd_amend, "record a correction to a case; the original entry stays visible")
    sp.add_argument("case_id", metavar="CASE_ID", help=CASE_ID_HELP)
    sp.add_argument("--author", required=True, metavar="ID", help="who makes the correction")
    sp.add_argument("--reason", required=True, metavar="TEXT", help="why the record is corrected")
    sp.add_argument("--label", metavar="L", help="the corrected label, if that is the correction; one of the "
                    "model's labels unless --new-label")
    sp.add_argument("--new-label", action="store_true",
                    help="the label is not one the model knows; recorded as such")
