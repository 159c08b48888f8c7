"""Pytest fixtures for the sheet tests: a synthetic case body, its blobs and reviews (tests/sheet/fixtures.py)."""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import pytest


def load_sheet_fixtures():
    """tests/sheet/fixtures.py under a name of its own, so other rooms' helper files cannot clash."""
    name = "casefile_test_sheet_fixtures"
    if name not in sys.modules:
        spec = importlib.util.spec_from_file_location(name, Path(__file__).with_name("fixtures.py"))
        module = importlib.util.module_from_spec(spec)
        sys.modules[name] = module
        spec.loader.exec_module(module)
    return sys.modules[name]


@pytest.fixture(scope="session")
def fx():
    return load_sheet_fixtures()


@pytest.fixture(scope="session")
def sheet_pdf(fx) -> bytes:
    """One rendered A4 sheet of the DICOM-source fixture case with two reviews."""
    from casefile.sheet import render_sheet

    case, blobs = fx.build_case()
    return render_sheet(case, blob=fx.BlobStore(blobs), reviews=fx.reviews(2), as_of_seq=42,
                        entry_hash=fx.ENTRY_HASH)


@pytest.fixture(scope="session")
def real_ledger(tmp_path_factory):
    """Four demo inputs (two DICOM, two PNG; two with the corner marker) explained and recorded by the
    demo's shortcut model: real case bodies with every method's parameters, for the sheet tests."""
    import torch

    from casefile.ledger import Ledger
    from casefile.models import load_model
    from casefile.pipeline import RunSettings, explain_batch
    from demo_cases.build import write_inputs
    from demo_cases.train import ENTRY_POINT, train

    torch.set_num_threads(1)
    out = tmp_path_factory.mktemp("real-cases")
    truth = write_inputs(out / "inputs", seed=7, n_cases=4)
    model = train(7, shortcut=True, out_dir=out / "models")
    ledger = Ledger(str(out / "casefile.db"))
    summary = explain_batch(ledger, [out / "inputs" / n for n in truth], load_model(model["weights"], model["card"],
                                                                                     trusted_entry_points=[ENTRY_POINT]),
                            RunSettings(), progress=False)
    assert summary.recorded == 4, summary.text()
    return ledger
