"""Commands on the ledger itself: init, verify, seal, keygen."""

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
    report = open_ledger(args).verify(args.seal, public_key=args.public_key, strict=args.strict)
    if args.json:
        jsonl(report.to_dict())
    else:
        print(report.summary())
        for note in report.notes:
            err(f"note: {note}")
    return 0 if report.ok else 1


def _verify_usage(args: argparse.Namespace) -> str | None:
    if args.public_key and not args.seal:
        return ("--public-key checks the signature of a seal file, so it needs --seal FILE; "
                "without --seal, verify checks the chain, blobs and query tables")
    return None


def cmd_seal(args: argparse.Namespace) -> int:
    from casefile.ledger import seal_file_bytes

    led = open_ledger(args)
    entry = led.seal(args.key, note=args.note)
    data = seal_file_bytes(entry)
    if args.output:
        with open(args.output, "wb") as f:
            f.write(data)
    if args.json:
        jsonl({"seq": entry.seq, "hash": entry.hash, **entry.body, "file": args.output})
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


def register(sub: argparse._SubParsersAction) -> None:
    command(sub, "init", cmd_init, "create an empty ledger (safe to repeat)")

    sp = command(sub, "verify", cmd_verify, "check every hash, link, blob and query row; exit 1 naming the "
                 "first bad seq", check=_verify_usage)
    sp.add_argument("--seal", metavar="FILE", help="also prove the ledger still holds the history in this seal file")
    sp.add_argument("--public-key", metavar="FILE",
                    help="trusted Ed25519 public key the seal must be signed with (needs --seal)")
    sp.add_argument("--strict", action="store_true",
                    help="also re-check each body's canonical form and schema (slower)")

    sp = command(sub, "seal", cmd_seal, "record a seal (head hash + Merkle root) and export it to a file")
    sp.add_argument("--key", metavar="FILE", help="Ed25519 private key file to sign the seal with")
    sp.add_argument("-o", "--output", metavar="FILE", help="write the seal file here")
    sp.add_argument("--note", help="a short note stored in the seal")

    sp = command(sub, "keygen", cmd_keygen, "create an Ed25519 key pair for signing seals", json_=False)
    sp.add_argument("path", metavar="FILE", help="where to write the private key (public key: FILE.pub)")
