"""Commands that compute recorded cases again: replay."""

from __future__ import annotations

import argparse

from casefile.cli.common import (
    CASE_ID_HELP,
    command,
    err,
    jsonl,
    non_negative_float,
    open_ledger,
    share,
    since_time,
    until_time,
)
from casefile.tolerances import CONFIDENCE_ABS, MAP_MAX_ABS_REL, MAP_SPEARMAN_MIN, Tolerances


def _tolerances(args: argparse.Namespace) -> Tolerances:
    return Tolerances(confidence_abs=args.confidence_tolerance, map_spearman_min=args.map_rho,
                      map_max_abs_rel=args.map_difference)


def cmd_replay(args: argparse.Namespace) -> int:
    from casefile.replay import replay_all, replay_case

    led = open_ledger(args)
    if args.all:
        result = replay_all(led, args.folder, args.model, args.card, since=args.since, until=args.until,
                            tolerances=_tolerances(args))
        replays, missing = result.replays, result.missing
    else:
        replays, missing = [replay_case(led, args.case_id, args.model, args.card, args.input,
                                        tolerances=_tolerances(args))], []
    for r in replays:
        if args.json:
            jsonl({"seq": r.entry.seq, "hash": r.entry.hash, **r.entry.body})
        else:
            print("\n".join(r.lines()))
    for case_id in missing:
        err(f"casefile replay: {case_id}: no input with the recorded SHA-256 in {args.folder}; not replayed")
    if args.all and not args.json:
        good = sum(r.reproduces for r in replays)
        print(f"replayed {len(replays)}: {good} reproduce, {len(replays) - good} do not; "
              f"{len(missing)} without an input")
    return 0 if replays and all(r.reproduces for r in replays) and not missing else 1


def _replay_usage(args: argparse.Namespace) -> str | None:
    """Split the positionals: CASE_ID INPUT, or with --all one FOLDER (set before CASE_ID is resolved)."""
    given = list(args.targets)
    args.case_id = args.input = args.folder = None
    if args.all:
        if len(given) != 1:
            return "--all takes one FOLDER of inputs: casefile replay --all --model M --card C FOLDER"
        args.folder = given[0]
        return None
    if args.since or args.until:
        return "--since and --until go with --all"
    if len(given) != 2:
        return "give CASE_ID and INPUT (or --all FOLDER)"
    args.case_id, args.input = given
    return None


def _intermix(sp: argparse.ArgumentParser) -> None:
    """Let ``sp`` take positionals on both sides of its options (``CASE_ID --model M --card C INPUT``):
    the call its parent makes goes through argparse's intermixed parsing, which itself calls the plain
    method (kept here) for each of its passes."""
    plain = sp.parse_known_args
    busy = [False]

    def parse(args=None, namespace=None):  # noqa: ANN001, ANN202 - argparse's own signature
        if busy[0]:
            return plain(args, namespace)
        busy[0] = True
        try:
            return sp.parse_known_intermixed_args(args, namespace)
        finally:
            busy[0] = False

    sp.parse_known_args = parse  # type: ignore[method-assign]


def register(sub: argparse._SubParsersAction) -> None:
    sp = command(sub, "replay", cmd_replay, "compute a recorded case again from the same input and model with the "
                 "recorded settings, compare, and record the replay; exit 0 when it reproduces, 1 when not",
                 check=_replay_usage,
                 epilog="Refused before anything is computed when the input's or the model's SHA-256 differs from "
                        "the record. Reproduces: same label, confidence within --confidence-tolerance, every map "
                        "with Spearman rho >= --map-rho and largest difference <= --map-difference of its largest "
                        "value, every check outcome equal.\n"
                        "example: casefile replay cf-1a2b3c4d --model net.pt2 --card card.json scan_0042.dcm")
    # CASE_ID comes before the options and INPUT after them: positionals may stand on both sides of options
    # (argparse's intermixed parsing, which works for a parser without subcommands of its own, as this one)
    _intermix(sp)
    sp.usage = ("casefile replay [options] --model FILE --card FILE CASE_ID INPUT\n"
                "       casefile replay [options] --model FILE --card FILE --all [--since T] [--until T] FOLDER")
    sp.add_argument("targets", metavar="CASE_ID INPUT | FOLDER", nargs="+",
                    help=f"CASE_ID: {CASE_ID_HELP}; INPUT: the file the case was recorded from; with --all, "
                         "FOLDER: a folder of inputs, matched to cases by SHA-256")
    sp.add_argument("--model", required=True, metavar="FILE", help="the model file, as given to explain")
    sp.add_argument("--card", required=True, metavar="FILE", help="the model card (JSON)")
    sp.add_argument("--all", action="store_true",
                    help="replay every case of this model (optionally --since/--until) whose input is in FOLDER")
    sp.add_argument("--since", metavar="T", type=since_time, help="with --all: cases recorded at or after T")
    sp.add_argument("--until", metavar="T", type=until_time, help="with --all: cases recorded at or before T")
    sp.add_argument("--confidence-tolerance", type=non_negative_float, default=CONFIDENCE_ABS, metavar="X",
                    help=f"largest absolute confidence difference that still reproduces (default {CONFIDENCE_ABS:g})")
    sp.add_argument("--map-rho", type=share, default=MAP_SPEARMAN_MIN, metavar="R",
                    help=f"smallest Spearman rho between a recorded and a replayed map (default {MAP_SPEARMAN_MIN:g})")
    sp.add_argument("--map-difference", type=non_negative_float, default=MAP_MAX_ABS_REL, metavar="D",
                    help="largest absolute map difference, as a share of the recorded map's largest value "
                         f"(default {MAP_MAX_ABS_REL:g})")
