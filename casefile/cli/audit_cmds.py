"""Commands an auditor uses on recorded cases: audit, history, amend."""

from __future__ import annotations

import argparse
import sys

from casefile.cli.common import add_case_filters, case_filters, command, open_ledger, print_entry, print_rows


def cmd_audit(args: argparse.Namespace) -> int:
    from casefile.audit import audit_rows, format_table, write_csv

    rows = audit_rows(open_ledger(args), kind=args.kind, **case_filters(args))
    if args.csv:
        write_csv(rows, sys.stdout)
    else:
        print_rows(args, rows, format_table)
    return 0


def _audit_usage(args: argparse.Namespace) -> str | None:
    if args.csv and args.json:
        return "choose one of --csv and --json"
    return None


def cmd_history(args: argparse.Namespace) -> int:
    from casefile.audit import format_history, history

    print_rows(args, history(open_ledger(args), args.case_id), format_history)
    return 0


def cmd_amend(args: argparse.Namespace) -> int:
    from casefile.audit import amend_case

    changes = {"label": args.label} if args.label else None
    entry = amend_case(open_ledger(args), args.case_id, author=args.author, reason=args.reason, changes=changes)
    print_entry(args, entry, f"amendment recorded as seq {entry.seq}; the original entry seq "
                             f"{entry.body['amends_seq']} is kept")
    return 0


def register(sub: argparse._SubParsersAction) -> None:
    sp = command(sub, "audit", cmd_audit, "list recorded cases (or entries of one kind) with filters",
                 check=_audit_usage)
    sp.add_argument("--kind", help="list entries of this kind instead of cases (failed, review, draw, seal …)")
    add_case_filters(sp)
    sp.add_argument("--csv", action="store_true", help="CSV on stdout")

    sp = command(sub, "history", cmd_history, "everything recorded about one case: the case, amendments, reviews")
    sp.add_argument("case_id", metavar="CASE_ID")

    sp = command(sub, "amend", cmd_amend, "record a correction to a case; the original entry stays visible")
    sp.add_argument("case_id", metavar="CASE_ID")
    sp.add_argument("--author", required=True, metavar="ID", help="who makes the correction")
    sp.add_argument("--reason", required=True, metavar="TEXT", help="why the record is corrected")
    sp.add_argument("--label", metavar="L", help="the corrected label, if that is the correction")
