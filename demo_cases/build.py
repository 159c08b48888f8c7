"""Builds the demo scenario in one folder: ~40 input files (DICOM and PNG), both models, cards, truth.json."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np

from casefile.models import pin_card
from demo_cases.scenario import LABELS, make_case
from demo_cases.train import ENTRY_POINT, train
from demo_cases.writers import write_dicom, write_png


def write_inputs(out_dir: str | Path, seed: int = 7, n_cases: int = 40) -> dict[str, dict[str, Any]]:
    """Write n_cases pictures to out_dir: odd case numbers DICOM, even PNG; a marker on every other pair.

    Labels are balanced and shuffled; where a marker is present it is the glyph of the true label
    (as a labelling station might stamp it). Returns {file name: {"label", "marker", "case_no"}}.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng([seed, 2024])
    labels = rng.permutation(np.arange(n_cases) % len(LABELS))
    markers = rng.permutation(np.arange(n_cases) % 2 == 0)  # exactly half carry a marker
    truth: dict[str, dict[str, Any]] = {}
    for i, (lab, has_marker) in enumerate(zip(labels, markers, strict=True), start=1):
        img = make_case(rng, int(lab), marker=bool(has_marker))
        if i % 2:
            name = f"case_{i:03d}.dcm"
            write_dicom(out / name, img, case_no=i, seed=seed, burned_in=bool(has_marker))
        else:
            name = f"case_{i:03d}.png"
            write_png(out / name, img)
        truth[name] = {"label": LABELS[int(lab)], "marker": bool(has_marker), "case_no": i}
    return truth


def pin_cards(paths: dict[str, Path]) -> dict[str, Path]:
    """Pin each model's card to its weights, as a site would before use (casefile.models.pin_card).

    A card describes one weights file, so the TorchScript copy gets a card of its own,
    ``<name>.ts.card.json`` (``paths["torchscript_card"]``), pinned to the .ts file; it needs no
    entry point and no state dict.
    """
    pin_card(paths["card"], paths["weights"], trusted_entry_points=[ENTRY_POINT])
    if "torchscript" in paths:
        card = json.loads(paths["card"].read_text(encoding="utf-8"))
        for key in ("weights", "entry_point", "weights_sha256"):
            card.pop(key, None)
        ts_card = paths["card"].with_name(paths["card"].name.replace(".card.json", ".ts.card.json"))
        ts_card.write_text(json.dumps(card, indent=2) + "\n", encoding="utf-8")
        pin_card(ts_card, paths["torchscript"])
        paths = {**paths, "torchscript_card": ts_card}
    return paths


def build_scenario(out_dir: str | Path, seed: int = 7, n_cases: int = 40) -> dict[str, Any]:
    """Write inputs/, models/ (honest and shortcut: state dict, TorchScript, card) and truth.json.

    Returns {"dir", "inputs" (list of paths), "truth" (path of truth.json), "cases" (the truth mapping),
    "honest" and "shortcut" (dicts of paths from demo_cases.train.train, with the cards pinned to their
    weights and a "torchscript_card": see pin_cards)}. Nothing is written elsewhere.
    """
    out = Path(out_dir)
    inputs_dir, models_dir = out / "inputs", out / "models"
    cases = write_inputs(inputs_dir, seed=seed, n_cases=n_cases)
    honest = pin_cards(train(seed, shortcut=False, out_dir=models_dir))
    shortcut = pin_cards(train(seed, shortcut=True, out_dir=models_dir))
    manifest = {
        "scenario": "synthetic radiographs of cast aluminium parts (generated; no real parts or people)",
        "seed": seed,
        "labels": list(LABELS),
        "marker": "a 5x5 glyph of the true label burned into the top-left corner, inside an 8-px border",
        "models": {"honest": honest["card"].name, "shortcut": shortcut["card"].name},
        "files": cases,
    }
    truth_path = out / "truth.json"
    truth_path.write_text(json.dumps(manifest, indent=2, sort_keys=True) + "\n", encoding="utf-8")
    return {
        "dir": out,
        "inputs": [inputs_dir / name for name in cases],
        "truth": truth_path,
        "cases": cases,
        "honest": honest,
        "shortcut": shortcut,
    }
