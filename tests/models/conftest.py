"""Shared fixtures for the model room: one tiny seeded classifier saved in every supported form."""

from __future__ import annotations

import json
import warnings
from pathlib import Path
from typing import Any

import pytest
import torch

from demo_cases.nets import tiny_net

torch.set_num_threads(1)

LABELS4 = ["sound", "porosity", "shrinkage", "crack"]
# The tests vouch for the demo's own factory by name, as a calling program may; nothing else is trusted.
TRUSTED = ("demo_cases.nets:tiny_net",)


@pytest.fixture(autouse=True)
def _own_site_settings(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> Path:
    """Each test reads an empty site folder of its own: nothing on this machine decides what is trusted."""
    for name in ("CASEFILE_TRUSTED_ENTRY_POINTS", "CASEFILE_MAX_PIXELS", "CASEFILE_MAX_FILE_PIXELS"):
        monkeypatch.delenv(name, raising=False)
    folder = tmp_path / "site-config"
    monkeypatch.setenv("CASEFILE_CONFIG_DIR", str(folder))
    return folder


def card_dict(**over: Any) -> dict[str, Any]:
    card: dict[str, Any] = {
        "name": "tiny-test",
        "version": "0.0.1",
        "labels": list(LABELS4),
        "input": {"width": 32, "height": 32, "channels": 1},
        "normalisation": {"mean": [0.5], "std": [0.25]},
        "windowing": "file",
        "layer": "features.block3",
        "roi": {"rule": "border", "pixels": 4},
        "intended_use": "tests only",
        "entry_point": "demo_cases.nets:tiny_net",
        "entry_point_args": {"width": 2},
        "weights": "tiny.pt",
    }
    card.update(over)
    return card


def write_card(path: Path, **over: Any) -> Path:
    path.write_text(json.dumps(card_dict(**over)), encoding="utf-8")
    return path


@pytest.fixture(scope="session")
def tiny(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """The same seeded TinyNet(width=2) as state dict, TorchScript and torch.export archive, plus a card."""
    d = tmp_path_factory.mktemp("tiny")
    torch.manual_seed(3)
    model = tiny_net(width=2).eval()
    torch.save(model.state_dict(), d / "tiny.pt")
    with warnings.catch_warnings():  # TorchScript is deprecated upstream; we still load it
        warnings.simplefilter("ignore", DeprecationWarning)
        torch.jit.save(torch.jit.script(model), str(d / "tiny.ts"))
    program = torch.export.export(model, (torch.zeros(1, 1, 32, 32),))
    torch.export.save(program, str(d / "tiny.pt2"))
    return {"dir": d, "weights": d / "tiny.pt", "ts": d / "tiny.ts", "pt2": d / "tiny.pt2",
            "card": write_card(d / "card.json")}
