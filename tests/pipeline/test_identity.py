"""Model identity, refusals before the first write, and inputs named by digest, end to end.

Outside sources: SHA-256 (FIPS 180-4) through Python's hashlib for every digest compared here; pypdf
(reference library) to read the sheet's text back; SQLite's own file bytes for the "no base name in the
ledger" check. The refusal rules (patch and stride within the model input) are ours: an occlusion patch
larger than the picture covers it whole, which is common-practice nonsense for a sensitivity map.
"""

from __future__ import annotations

import hashlib
import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from pypdf import PdfReader

from casefile.cautions import WEIGHTS_NOT_PINNED
from casefile.ledger import Ledger
from casefile.models import load_model
from casefile.models.loading import ONE_AT_A_TIME
from casefile.pipeline import RunSettings, record_case, write_sheet
from demo_cases.train import ENTRY_POINT

ROOT = Path(__file__).resolve().parents[2]
TRUSTED = (ENTRY_POINT,)
RUN = RunSettings(patch=8, stride=4)


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _env(tmp: Path) -> dict[str, str]:
    return {**os.environ, "CASEFILE_SITE_KEY": str(tmp / "site.key"), "CASEFILE_CONFIG_DIR": str(tmp / "config"),
            "CASEFILE_TRUSTED_ENTRY_POINTS": ENTRY_POINT}


def cli(tmp: Path, store: Path, *args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "casefile.cli", "--store", str(store), *args],
                          capture_output=True, text=True, cwd=ROOT, env=_env(tmp))


def _store(tmp: Path) -> Path:
    """A ledger holding one entry, so a refusal can be seen not to move its head."""
    path = tmp / "l.db"
    led = Ledger(str(path))
    led.append("failed", {"attempted_at": "2026-11-01T00:00:00Z", "file_name": "x.png", "reason": "test"})
    led.close()
    return path


def _head(store: Path) -> tuple[int, str]:
    led = Ledger(str(store), create=False)
    try:
        return led.head()
    finally:
        led.close()


def test_shortcut_weights_with_the_honest_card_are_refused_and_a_pinned_card_records_the_right_name(
        demo_dir, tmp_path):
    models = demo_dir / "scenario" / "models"
    honest_card, shortcut_weights = models / "casting-honest.card.json", models / "casting-shortcut.pt"
    pinned = json.loads(honest_card.read_text())["weights_sha256"]
    assert pinned == _sha(models / "casting-honest.pt")  # the demo pins its cards
    store = _store(tmp_path)
    before = _head(store)
    one = str(sorted((demo_dir / "scenario" / "inputs").iterdir())[0])
    wrong = cli(tmp_path, store, "explain", "--model", str(shortcut_weights), "--card", str(honest_card), "-q", one)
    assert wrong.returncode == 1 and wrong.stderr.count("\n") == 1, wrong.stderr
    assert _sha(shortcut_weights) in wrong.stderr and pinned in wrong.stderr  # both digests, one line
    assert "casting-honest.card.json" in wrong.stderr and "not the model the card describes" in wrong.stderr
    assert _head(store) == before  # nothing recorded

    # the shortcut's own card, unpinned, pinned with `casefile card pin`, then used: the right name
    card = json.loads((models / "casting-shortcut.card.json").read_text())
    card.pop("weights_sha256")
    card["weights"] = str(shortcut_weights)
    own = tmp_path / "shortcut.card.json"
    own.write_text(json.dumps(card, indent=2) + "\n")
    pin = cli(tmp_path, store, "card", "pin", str(own), str(shortcut_weights))
    assert pin.returncode == 0 and _sha(shortcut_weights) in pin.stdout, pin.stderr
    ok = cli(tmp_path, store, "explain", "--model", str(shortcut_weights), "--card", str(own), "--json", "-q",
             "--patch", "16", "--stride", "8", one)
    assert ok.returncode == 0, ok.stderr
    line = json.loads(ok.stdout)
    led = Ledger(str(store), create=False)
    body = led.case(line["case_id"]).entry.body
    assert body["model"]["name"] == "casting-shortcut" and body["model"]["digest"] == _sha(shortcut_weights)
    assert body["model"]["weights_pinned"] is True and WEIGHTS_NOT_PINNED not in body["model"].get("notes", [])


def test_an_unpinned_card_is_recorded_and_shown_as_not_pinned(tiny, tmp_path):
    loaded = load_model(tiny["weights"], tiny["card"], trusted_entry_points=TRUSTED)
    assert loaded.weights_pinned is False
    led = Ledger(str(tmp_path / "l.db"))
    out = record_case(led, loaded, str(tiny["inputs"] / "part_0001.png"), run=RUN, key=str(tmp_path / "k"))
    model = out.body["model"]
    assert model["weights_pinned"] is False and model["notes"][0] == WEIGHTS_NOT_PINNED
    sheet = write_sheet(led, out.case_id, tmp_path)
    text = " ".join(p.extract_text() for p in PdfReader(str(sheet)).pages)
    assert WEIGHTS_NOT_PINNED in " ".join(text.split())


def test_a_fixed_batch_model_is_explained_one_image_at_a_time_and_the_record_says_so(tiny, tmp_path):
    fixed = load_model(tiny["pt2"], tiny["card"])
    free = load_model(tiny["weights"], tiny["card"], trusted_entry_points=TRUSTED)
    assert fixed.fixed_batch and not free.fixed_batch
    led = Ledger(str(tmp_path / "l.db"))
    path = str(tiny["inputs"] / "part_0001.png")
    a = record_case(led, fixed, path, run=RUN, key=str(tmp_path / "k"))
    b = record_case(led, free, path, run=RUN, key=str(tmp_path / "k"))
    assert a.outcome == b.outcome == "recorded"
    assert ONE_AT_A_TIME in a.body["model"]["notes"] and ONE_AT_A_TIME not in b.body["model"].get("notes", [])
    occ = {o.case_id: next(m for m in o.body["maps"] if m["method"] == "occlusion") for o in (a, b)}
    assert occ[a.case_id]["params"]["batch_size_used"] == 1 and occ[b.case_id]["params"]["batch_size_used"] > 1
    # the same weights give the same occlusion map and the same check outcomes either way
    maps = {cid: np.frombuffer(led.blob(m["raw_blob"]), dtype="<f4") for cid, m in occ.items()}
    np.testing.assert_allclose(maps[a.case_id], maps[b.case_id], atol=1e-6)
    assert [c["outcome"] for c in a.body["checks"]] == [c["outcome"] for c in b.body["checks"]]


@pytest.mark.parametrize("args, flag", [
    (["--patch", "33"], "--patch"),            # larger than the 32-pixel input
    (["--stride", "40"], "--stride"),          # larger than the input
    (["--patch", "4", "--stride", "6"], "--stride"),  # pixels between patches never covered
    (["--stride", "9"], "--stride"),           # larger than the default patch (32 / 7 -> 5 px)
    (["--frame", "-1"], "--frame"),
    (["--name-policy", "initials"], "--name-policy"),
    (["--occlusion-mode", "fast"], "--occlusion-mode"),
    (["--fidelity", "0.5"], "--fidelity"),  # the default mode is exact and takes no fidelity
    (["--occlusion-mode", "truncated", "--fidelity", "1.5"], "--fidelity"),
])
def test_options_that_cannot_work_with_the_model_are_usage_errors_before_any_write(tiny, tmp_path, args, flag):
    store = _store(tmp_path)
    before = _head(store)
    done = cli(tmp_path, store, "explain", "--model", str(tiny["weights"]), "--card", str(tiny["card"]), "-q",
               *args, str(tiny["inputs"]))
    assert done.returncode == 2, done.stderr
    assert flag in done.stderr.splitlines()[-1] and "Traceback" not in done.stderr
    assert _head(store) == before


@pytest.mark.parametrize("what", ["missing input", "unknown layer", "wrong weights", "foreign store"])
def test_other_refusals_are_one_line_before_any_write(tiny, tmp_path, what):
    import sqlite3

    store = _store(tmp_path)
    model, card, inputs = str(tiny["weights"]), tiny["card"], [str(tiny["inputs"])]
    extra: list[str] = []
    if what == "missing input":
        inputs.append(str(tmp_path / "scnas"))  # a typo must not become a failed entry per file
    elif what == "unknown layer":
        extra = ["--layer", "features.nope"]
    elif what == "wrong weights":
        c = json.loads(card.read_text())
        c["weights_sha256"] = "0" * 64
        c["weights"] = str(tiny["weights"])
        card = tmp_path / "pinned.card.json"
        card.write_text(json.dumps(c))
    elif what == "foreign store":
        store = tmp_path / "inventory.db"
        with sqlite3.connect(store) as conn:
            conn.execute("CREATE TABLE parts (id INTEGER)")
    before = store.read_bytes()
    head = _head(store) if what != "foreign store" else None
    done = cli(tmp_path, store, "explain", "--model", model, "--card", str(card), "-q", *extra, *inputs)
    assert done.returncode == 1 and done.stderr.count("\n") == 1 and "Traceback" not in done.stderr, done.stderr
    if head is not None:
        assert _head(store) == head
    else:
        assert store.read_bytes() == before and "not a casefile ledger" in done.stderr


def test_inputs_named_by_digest_leave_no_base_name_in_the_ledger_or_the_sheet(tiny, tmp_path):
    inputs = tmp_path / "in"
    inputs.mkdir()
    person = tiny["inputs"] / "smith_john_1961.png"
    (inputs / person.name).write_bytes(person.read_bytes())
    (inputs / "doe_jane_1970.png").write_bytes(person.read_bytes()[:60])  # truncated: a failed attempt
    store = tmp_path / "private.db"
    sheets = tmp_path / "sheets"
    done = cli(tmp_path, store, "explain", "--model", str(tiny["weights"]), "--card", str(tiny["card"]), "-q",
               "--name-policy", "digest", "--patch", "8", "--stride", "4", "--sheets", str(sheets), "--json",
               str(inputs))
    assert done.returncode == 1, done.stderr  # one input failed
    led = Ledger(str(store), create=False)
    case = next(led.entries(kind="case")).body
    assert case["input"]["file_name"] == "sha256:" + _sha(person)[:16]
    failed = next(led.entries(kind="failed")).body
    assert failed["file_name"] == "sha256:" + _sha(inputs / "doe_jane_1970.png")[:16]
    led.close()
    raw = b"".join(p.read_bytes() for p in tmp_path.glob("private.db*"))  # the file and its write-ahead log
    for needle in (b"smith", b"john", b"doe_jane", b"1961", b"1970"):
        assert needle not in raw
    text = " ".join(p.extract_text() for s in sheets.glob("*.pdf") for p in PdfReader(str(s)).pages)
    assert "sha256:" in text and "smith" not in text and "john" not in text


def test_a_card_can_ask_for_digest_names(tiny, tmp_path):
    c = json.loads(tiny["card"].read_text())
    c["record_file_name"] = False
    c["weights"] = str(tiny["weights"])
    card = tmp_path / "private.card.json"
    card.write_text(json.dumps(c))
    loaded = load_model(tiny["weights"], card, trusted_entry_points=TRUSTED)
    led = Ledger(str(tmp_path / "l.db"))
    person = tiny["inputs"] / "smith_john_1961.png"
    # the card's false wins over a run that asks for base names: either one asking for digests is enough
    out = record_case(led, loaded, str(person), run=RunSettings(patch=8, stride=4, name_policy="base-name"),
                      key=str(tmp_path / "k"))
    assert out.body["input"]["file_name"] == "sha256:" + _sha(person)[:16]


def test_the_record_says_how_occlusion_was_computed_and_an_approximate_map_says_so(tiny, tmp_path):
    free = load_model(tiny["weights"], tiny["card"], trusted_entry_points=TRUSTED)
    led = Ledger(str(tmp_path / "l.db"))
    path = str(tiny["inputs"] / "part_0001.png")
    default = record_case(led, free, path, run=RUN, key=str(tmp_path / "k"))
    exact = record_case(led, free, path, run=RunSettings(patch=8, stride=4, occlusion_mode="incremental"),
                        key=str(tmp_path / "k"))
    approx = record_case(led, free, path, run=RunSettings(patch=8, stride=4, occlusion_mode="coarse-to-fine"),
                         key=str(tmp_path / "k"))
    params = {o.case_id: next(m for m in o.body["maps"] if m["method"] == "occlusion")["params"]
              for o in (default, exact, approx)}
    d, e, a = params[default.case_id], params[exact.case_id], params[approx.case_id]
    # the tiny test model is far below the size where windows save time: auto runs the plain method
    assert (d["mode"], d["exact"]) == ("batched", True) and "million multiply-adds per image" in d["notes"][0]
    assert default.body["settings"]["explain"]["occlusion_mode"] == "auto"
    assert (e["mode"], e["exact"], e["fidelity"], e["notes"]) == ("incremental", True, None, [])
    assert (a["mode"], a["exact"], a["fidelity"]) == ("coarse-to-fine", False, 0.25)
    assert "interpolated from the coarse map" in a["summary"]
    text = " ".join(p.extract_text() for p in PdfReader(write_sheet(led, approx.case_id, path=tmp_path / "a.pdf")).pages)
    assert "approximate map (coarse to fine, fidelity 0.25)" in " ".join(text.split())
