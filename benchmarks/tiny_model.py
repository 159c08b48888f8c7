"""The small model and card the replay and worker benchmarks run: the demo's network, random weights."""

from __future__ import annotations

import json
from pathlib import Path

import torch

from demo_cases.nets import tiny_net
from demo_cases.train import ENTRY_POINT


def write_tiny_model(folder: Path, name: str, *, width: int, seed: int) -> tuple[Path, Path]:
    """Write ``net.pt`` (a state dict for the demo's entry point) and ``card.json`` into ``folder``."""
    torch.manual_seed(seed)
    torch.save(tiny_net(width=width).eval().state_dict(), folder / "net.pt")
    card = {"name": name, "version": "1", "labels": ["sound", "porosity", "shrinkage", "crack"],
            "input": {"width": 64, "height": 64, "channels": 1}, "normalisation": {"mean": [0.5], "std": [0.25]},
            "windowing": "file", "layer": "features.block3", "roi": {"rule": "border", "pixels": 4},
            "intended_use": "benchmark only", "entry_point": ENTRY_POINT, "entry_point_args": {"width": width},
            "weights": "net.pt"}
    (folder / "card.json").write_text(json.dumps(card))
    return folder / "net.pt", folder / "card.json"
