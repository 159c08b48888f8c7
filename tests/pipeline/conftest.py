"""One demo run per test session (the scenario, both models and a ledger that later tests read), and a
tiny model of our own for the tests that need no demo."""

from __future__ import annotations

import json
import shutil
import warnings
from pathlib import Path

import numpy as np
import pytest
import torch
from PIL import Image

from casefile.demo import run_demo
from demo_cases.nets import tiny_net
from demo_cases.train import ENTRY_POINT


def copy_demo_ledger(demo_dir: Path, tmp_path: Path) -> Path:
    """A copy of the demo's ledger (with its WAL) that a test may append to; the session's stays as it was."""
    from casefile.ledger import Ledger

    store = tmp_path / "copy.db"
    src = Ledger(str(demo_dir / "casefile.db"), create=False)
    src.engine.dispose()
    shutil.copy(demo_dir / "casefile.db", store)
    for suffix in ("-wal", "-shm"):
        if (demo_dir / f"casefile.db{suffix}").exists():
            shutil.copy(demo_dir / f"casefile.db{suffix}", tmp_path / f"copy.db{suffix}")
    return store


@pytest.fixture(scope="session")
def demo_dir(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("demo")
    assert run_demo(out) == 0
    return out


@pytest.fixture()
def few_inputs(demo_dir, tmp_path) -> Path:
    """Ten of the demo's inputs (DICOM and PNG) copied into a fresh folder."""
    folder = tmp_path / "inputs"
    folder.mkdir()
    for src in sorted((demo_dir / "scenario" / "inputs").iterdir())[:10]:
        shutil.copy(src, folder / src.name)
    return folder


@pytest.fixture()
def honest(demo_dir) -> tuple[str, str]:
    models = demo_dir / "scenario" / "models"
    return str(models / "casting-honest.pt"), str(models / "casting-honest.card.json")


@pytest.fixture(scope="session")
def tiny(tmp_path_factory) -> dict[str, Path]:
    """A seeded TinyNet on 32 x 32 grey pictures: state dict, a .pt2 exported at batch one, an unpinned
    card, and two inputs, one of them named like a person."""
    d = tmp_path_factory.mktemp("tiny")
    torch.manual_seed(11)
    net = tiny_net(width=2).eval()
    torch.save(net.state_dict(), d / "tiny.pt")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        torch.export.save(torch.export.export(net, (torch.zeros(1, 1, 32, 32),)), str(d / "tiny.pt2"))
    card = {"name": "tiny-identity", "version": "1", "labels": ["sound", "porosity", "shrinkage", "crack"],
            "input": {"width": 32, "height": 32, "channels": 1}, "normalisation": {"mean": [0.5], "std": [0.25]},
            "windowing": "file", "layer": "features.block3", "roi": {"rule": "border", "pixels": 4},
            "intended_use": "tests only", "entry_point": ENTRY_POINT, "entry_point_args": {"width": 2},
            "weights": "tiny.pt"}
    (d / "card.json").write_text(json.dumps(card, indent=2) + "\n")
    rng = np.random.default_rng(5)
    inputs = d / "inputs"
    inputs.mkdir()
    for name in ("part_0001.png", "smith_john_1961.png"):
        Image.fromarray(rng.integers(0, 255, (32, 32), dtype=np.uint8)).save(inputs / name)
    return {"dir": d, "weights": d / "tiny.pt", "pt2": d / "tiny.pt2", "card": d / "card.json", "inputs": inputs}
