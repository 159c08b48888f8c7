"""Commands for the review page: reader add / reader list (accounts), serve (the page)."""

from __future__ import annotations

import argparse
import getpass
import sys

from casefile.cli.common import command, err, jsonl, open_ledger, positive_int, print_entry, subcommand
from casefile.errors import UsageError, ValidationError


def _passwords(reader_id: str) -> tuple[str, str]:
    """The password twice: typed at the terminal without echo, or two lines of standard input."""
    if sys.stdin.isatty():
        first = getpass.getpass(f"password for {reader_id}: ")
        again = getpass.getpass("the same password again: ")
        return first, again
    lines = sys.stdin.read(4096).splitlines()
    if len(lines) < 2:
        raise ValidationError(f"reader {reader_id}: standard input must hold the password twice, one per line")
    return lines[0], lines[1]


def read_password(reader_id: str) -> str:
    """One password: typed at the terminal without echo, or the first line of standard input."""
    if sys.stdin.isatty():
        return getpass.getpass(f"password for {reader_id}: ")
    lines = sys.stdin.read(4096).splitlines()
    return lines[0] if lines else ""


def cmd_reader_add(args: argparse.Namespace) -> int:
    from casefile.review.accounts import add_reader, check_reader_id

    check_reader_id(args.reader_id)
    ledger = open_ledger(args)
    first, again = _passwords(args.reader_id)
    entry = add_reader(ledger, args.reader_id, first, again)
    print_entry(args, entry, f"reader {args.reader_id} added as seq {entry.seq}")
    return 0


def cmd_reader_list(args: argparse.Namespace) -> int:
    from casefile.review.accounts import reader_accounts

    for reader_id, e in sorted(reader_accounts(open_ledger(args)).items()):
        if args.json:
            jsonl({"reader": reader_id, "seq": e.seq, "added_at": e.body["added_at"]})
        else:
            print(f"{reader_id}\tadded {e.body['added_at']} (seq {e.seq})")
    return 0


def cmd_serve(args: argparse.Namespace) -> int:
    from casefile.server import check_host, serve

    check_host(args.host)
    if args.session_minutes > 1440:
        raise UsageError(f"--session-minutes {args.session_minutes}: at most 1440 (a day)")
    ledger = open_ledger(args)
    serve(ledger, args.host, args.port, session_minutes=args.session_minutes,
          ready=lambda url: err(f"review page at {url} (Ctrl-C stops it)"))
    return 0


def register(sub: argparse._SubParsersAction) -> None:
    sp = command(sub, "reader", None, "reader accounts for the review page (reader add, reader list)", json_=False)
    inner = sp.add_subparsers(dest="reader_command", metavar="ACTION")
    inner.required = True
    add = subcommand(inner, "add", cmd_reader_add, "add a reader account; the password is read twice from the "
                     "terminal, or as two lines of standard input; an account is never replaced",
                     prog_name="reader add")
    add.add_argument("reader_id", metavar="ID", help="the reader id: letters, digits, '.', '_', '@', '-'")
    subcommand(inner, "list", cmd_reader_list, "list reader accounts (ids and when added)", prog_name="reader list")

    sp = command(sub, "serve", cmd_serve, "serve the review page on a loopback address until Ctrl-C", json_=False)
    sp.add_argument("--host", default="127.0.0.1", help="a loopback address (default 127.0.0.1)")
    sp.add_argument("--port", type=positive_int, default=8765, metavar="N", help="port (default 8765)")
    sp.add_argument("--session-minutes", type=positive_int, default=30, metavar="M",
                    help="a sign-in lasts this many minutes, at most 1440 (default 30)")
