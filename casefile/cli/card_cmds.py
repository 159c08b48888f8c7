"""Commands on model cards: card pin (write the weights' SHA-256 into a card)."""

from __future__ import annotations

import argparse

from casefile.cli.common import command, jsonl, subcommand


def cmd_pin(args: argparse.Namespace) -> int:
    from casefile.models import pin_card

    result = pin_card(args.card, args.model, replace=args.replace)
    if args.json:
        jsonl(result.to_dict())
    else:
        print(result.words())
    return 0


def register(sub: argparse._SubParsersAction) -> None:
    sp = command(sub, "card", None, "work on model cards (card pin: pin a card to its weights' SHA-256)",
                 json_=False)
    inner = sp.add_subparsers(dest="card_command", metavar="ACTION")
    inner.required = True
    pin = subcommand(inner, "pin", cmd_pin, "write the SHA-256 of MODEL into CARD as weights_sha256, after "
                     "checking that MODEL loads with CARD; explain then refuses any other model file with this card",
                     prog_name="card pin")
    pin.add_argument("card", metavar="CARD", help="the model card (JSON) to pin; rewritten whole, key order kept")
    pin.add_argument("model", metavar="MODEL", help="the model file as explain --model takes it (.pt2, TorchScript, "
                     "state dict, or package.module:factory for the card's weights)")
    pin.add_argument("--replace", action="store_true",
                     help="replace a different digest the card already pins (only if it now describes MODEL)")
