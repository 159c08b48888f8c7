"""Commands on the ledger itself: init, verify, seal, keygen, rebuild."""

from __future__ import annotations

import argparse

from casefile.cli.common import command, err, jsonl, open_ledger


def cmd_init(args: argparse.Namespace) -> int:
    led = open_ledger(args, create=True)
    seq, h = led.head()
    if args.json:
        jsonl({"store": led.path, "head_seq": seq, "head_hash": h})
    else:
        print(f"ledger ready at {led.path} ({seq} entries)")
    return 0


def cmd_verify(args: argparse.Namespace) -> int:
    report = open_ledger(args, allow_outdated=True).verify(args.seal, public_key=args.public_key, unsigned_ok=args.unsigned_ok,
                                      strict=args.strict)
    if args.json:
        jsonl(report.to_dict())
    else:
        print("\n".join(report.lines()))
    for note in report.notes:
        err(f"note: {note}")
    return 0 if report.ok else 1


def _verify_usage(args: argparse.Namespace) -> str | None:
    if args.unsigned_ok and not args.seal:
        return "--unsigned-ok accepts an unproven seal file, so it needs --seal FILE"
    return None


def cmd_seal(args: argparse.Namespace) -> int:
    entry = open_ledger(args).seal(args.key, note=args.note, successor=args.successor, output=args.output)
    if args.json:
        jsonl({"seq": entry.seq, "hash": entry.hash, **entry.body, "file": args.output})
    else:
        signed = "signed" if "signature" in entry.body else "unsigned"
        print(f"seal recorded as seq {entry.seq} ({signed}): {entry.body['tree_size']} entries, "
              f"Merkle root {entry.body['merkle_root']}")
        if "successor" in entry.body:
            print(f"key {entry.body['signature']['public_key']} handed over to {entry.body['successor']}: "
                  "sign later seals with the successor")
        if args.output:
            print(f"seal file written to {args.output}; keep a copy outside this machine")
    return 0


def cmd_keygen(args: argparse.Namespace) -> int:
    from casefile.ledger import generate_key, load_public_key

    pub = generate_key(args.path)
    print(f"private key written to {args.path} (mode 0600; keep it off the ledger's machine)")
    print(f"public key written to {pub}: {load_public_key(pub)}")
    return 0


def cmd_rebuild(args: argparse.Namespace) -> int:
    entry = open_ledger(args, allow_outdated=True).rebuild_derived(args.reason)
    if args.json:
        jsonl({"seq": entry.seq, "hash": entry.hash, **entry.body})
    else:
        rows = ", ".join(f"{name} {n}" for name, n in entry.body["rows"].items())
        print(f"query tables rebuilt from {entry.body['entries']} entries ({rows}); recorded as seq {entry.seq}")
    return 0


def register(sub: argparse._SubParsersAction) -> None:
    command(sub, "init", cmd_init, "create an empty ledger (safe to repeat)")

    sp = command(sub, "verify", cmd_verify, "check every hash, link, blob and query row; exit 1 naming the "
                 "first bad seq", check=_verify_usage)
    sp.add_argument("--seal", metavar="FILE", help="also prove the ledger still holds the history in this seal file")
    sp.add_argument("--public-key", metavar="FILE", action="append",
                    help="a trusted Ed25519 public key (PEM file, or 64 hex digits); repeat for several. The "
                         "site's trusted_keys are trusted too. Seal entries inside the ledger are checked "
                         "against them as well")
    sp.add_argument("--unsigned-ok", action="store_true",
                    help="accept a seal file that is unsigned or signed by a key that is not trusted: it then "
                         "proves the ledger matches the file, not who made the seal (needs --seal)")
    sp.add_argument("--strict", action="store_true",
                    help="also re-check each body's canonical form and schema (slower)")

    sp = command(sub, "seal", cmd_seal, "record a seal (head hash + Merkle root) and export it to a file")
    sp.add_argument("--key", metavar="FILE", help="Ed25519 private key file to sign the seal with")
    sp.add_argument("-o", "--output", metavar="FILE", help="write the seal file here (signed with the same key)")
    sp.add_argument("--note", help="a short note stored in the seal")
    sp.add_argument("--successor", metavar="FILE",
                    help="hand over to this public key: later seals must be signed by it, and --key signs no more")

    sp = command(sub, "keygen", cmd_keygen, "create an Ed25519 key pair for signing seals", json_=False)
    sp.add_argument("path", metavar="FILE", help="where to write the private key (public key: FILE.pub)")

    sp = command(sub, "rebuild", cmd_rebuild, "recompute the query tables from the entries and record that it ran")
    sp.add_argument("--reason", required=True, metavar="TEXT", help="why the query tables are rebuilt (recorded)")
