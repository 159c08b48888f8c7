"""build_scenario: the demo folder holds the inputs, both models and a truth manifest that agree.

Outside sources: none apply; the scenario is our own invention. The checks are that the files agree
with the truth manifest written beside them (DICOM attributes are checked in test_scenario.py).
"""

from __future__ import annotations

import json
from collections import Counter

import numpy as np
import pydicom
from PIL import Image

from demo_cases.build import write_inputs
from demo_cases.scenario import LABELS


def test_truth_manifest_matches_the_files(scenario):
    truth = json.loads(scenario["truth"].read_text())
    files = truth["files"]
    assert len(files) == 40 and truth["seed"] == 7 and truth["labels"] == list(LABELS)
    assert sorted(p.name for p in scenario["inputs"]) == sorted(files)
    assert all(p.is_file() for p in scenario["inputs"])
    kinds = Counter(name.rsplit(".", 1)[1] for name in files)
    assert kinds == {"dcm": 20, "png": 20}
    assert sum(v["marker"] for v in files.values()) == 20
    assert Counter(v["label"] for v in files.values()) == dict.fromkeys(LABELS, 10)
    assert set(truth["models"].values()) == {"casting-honest.card.json", "casting-shortcut.card.json"}


def test_files_carry_what_the_manifest_says(scenario):
    truth = json.loads(scenario["truth"].read_text())["files"]
    inputs = scenario["dir"] / "inputs"
    for name, info in truth.items():
        if name.endswith(".dcm"):
            ds = pydicom.dcmread(inputs / name)
            assert ds.InstanceNumber == info["case_no"]
            assert ds.BurnedInAnnotation == ("YES" if info["marker"] else "NO")
            corner = ds.pixel_array[1:6, 1:6]
            assert (corner.max() == 4095) == info["marker"]  # background never reaches full scale
        else:
            assert np.asarray(Image.open(inputs / name)).shape == (64, 64)


def test_everything_stays_in_the_folder(scenario):
    written = {p.relative_to(scenario["dir"]).parts[0] for p in scenario["dir"].rglob("*")}
    assert written == {"inputs", "models", "truth.json"}


def test_inputs_are_reproducible(tmp_path):
    a = write_inputs(tmp_path / "a", seed=7, n_cases=6)
    b = write_inputs(tmp_path / "b", seed=7, n_cases=6)
    assert a == b
    for name in a:
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes()
