"""The command line: parse arguments, call one library function, print the result. No logic here.

Each group of commands lives in its own module with a ``register(sub)`` function; this module builds the
parser from them and turns every failure into one line on stderr (``--debug`` or ``CASEFILE_DEBUG=1``
shows the traceback instead). Exit codes: 0 success, 1 failure, 2 usage error, 130 interrupted.
"""

from __future__ import annotations

import argparse
import os
import sys
import traceback
from collections.abc import Sequence

from casefile import __version__
from casefile.cli import audit_cmds, card_cmds, case_cmds, ledger_cmds, review_cmds, server_cmds
from casefile.cli.common import STORE_HELP, err, resolve_case_ids
from casefile.errors import CasefileError, UsageError, one_line

GROUPS = (ledger_cmds, case_cmds, card_cmds, audit_cmds, review_cmds, server_cmds)
DEBUG_ENV = "CASEFILE_DEBUG"


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="casefile",
        description="Record image-classifier decisions with their explanations and sanity checks in an "
                    "append-only, tamper-evident ledger; render case sheets; audit, sample and verify. "
                    "An explanation shows what influenced the model, not whether it is right; decisions "
                    "rest with qualified staff.")
    p.add_argument("--version", action="version", version=f"casefile {__version__}")
    p.add_argument("--store", metavar="URL", help=STORE_HELP)
    p.add_argument("--debug", action="store_true",
                   help=f"show the full traceback of an error (also ${DEBUG_ENV}=1)")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    for group in GROUPS:
        group.register(sub)
    return p


def _debugging(args: argparse.Namespace) -> bool:
    return bool(getattr(args, "debug", False)) or os.environ.get(DEBUG_ENV, "").lower() in ("1", "true", "yes")


def _quiet_stdout() -> None:
    """After the reader of our output went away, point stdout at /dev/null so the final flush is silent."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError):
        pass


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    problem = args.check(args) if args.check else None
    if problem:
        args.subparser.error(problem)  # exit 2 with the command's usage line
    name = f"casefile {args.command}"
    debug = _debugging(args)
    try:
        resolve_case_ids(args)  # CASE_ID may be a unique prefix (8+ characters after "cf-")
        return int(args.func(args))
    except UsageError as exc:  # an option that cannot work with this model or ledger: exit 2, nothing written
        if debug:
            traceback.print_exc()
        args.subparser.error(one_line(exc, limit=2000))
    except BrokenPipeError:
        _quiet_stdout()
        err(f"{name}: the output was closed before everything was written")
        return 1
    except KeyboardInterrupt:
        err(f"{name}: interrupted; everything recorded so far is kept")
        return 130
    except CasefileError as exc:
        if debug:
            traceback.print_exc()
        err(f"{name}: {one_line(exc, limit=2000)}")
        return 1
    except OSError as exc:  # a file or folder the command was pointed at cannot be used
        if debug:
            traceback.print_exc()
        where = f"{exc.filename}: " if exc.filename else ""
        err(f"{name}: {where}{exc.strerror or one_line(exc, limit=2000)}")
        return 1
    except Exception as exc:  # anything else is still one line; --debug shows where it came from
        if debug:
            traceback.print_exc()
        err(f"{name}: unexpected error: {type(exc).__name__}: {one_line(exc, limit=2000)} "
            f"(run with --debug for the traceback)")
        return 1
