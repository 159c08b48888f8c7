"""Commands for reports over a period: report."""

from __future__ import annotations

import argparse

from casefile.cli.common import command, jsonl, open_ledger, since_time, until_time


def cmd_report(args: argparse.Namespace) -> int:
    from casefile.report import make_report, summary_lines

    fig, path = make_report(open_ledger(args), args.since, args.until, args.model, output=args.output)
    if args.json:
        jsonl(fig)
    else:
        print("\n".join(summary_lines(fig)))
        if path is not None:
            print(f"report written to {path}")
    return 0


def _report_usage(args: argparse.Namespace) -> str | None:
    if not args.output and not args.json:
        return "give -o FILE.pdf for the PDF, --json for the figures, or both"
    return None


def register(sub: argparse._SubParsersAction) -> None:
    sp = command(sub, "report", cmd_report, "a period report: cases per day or week per model version, status and "
                 "check outcome rates, confidence against the previous period (Kolmogorov-Smirnov drift signal), "
                 "second-read disagreement with Wilson intervals, the confusion table, a reliability diagram, "
                 "failed attempts; with the ledger head it was computed from", check=_report_usage,
                 epilog="example: casefile report --since 2026-11-01 --until 2026-11-30 -o november.pdf")
    sp.add_argument("--since", required=True, metavar="DATE", type=since_time,
                    help="first day (or time) of the period, ISO 8601, UTC unless a zone is given")
    sp.add_argument("--until", required=True, metavar="DATE", type=until_time,
                    help="last day (or time) of the period; a bare date includes that whole day")
    sp.add_argument("--model", help="model name, name@version, or digest prefix (8+ hex digits)")
    sp.add_argument("-o", "--output", metavar="FILE.pdf", help="write the report as PDF here")
