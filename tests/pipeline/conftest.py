"""One demo run per test session: the scenario, both models and a ledger that later tests read."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from casefile.demo import run_demo


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
