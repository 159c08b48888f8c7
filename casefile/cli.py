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
    report = _ledger(args).verify(args.seal, public_key=args.public_key)
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


def cmd_demo(args: argparse.Namespace) -> int:
    from casefile.demo import run_demo

    return run_demo(args.dir)


# ---------------------------------------------------------------------------------------- parser
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
