"""Oversized inputs in a batch: each is recorded as a failed attempt, and nothing recorded before changes.

The hostile files are those of tests/imaging/hostile.py (PNG and DICOM layouts cited there); the limits
are casefile's defaults (casefile/site.py). Ledger rules: DESIGN.md (append-only; a failed attempt is an
entry of kind "failed").

Outside sources: the PNG and DICOM layouts cited in tests/imaging/hostile.py (W3C PNG, DICOM PS3.5);
no outside source applies to the limits, which are casefile's defaults.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

from pydicom.uid import JPEGBaseline8Bit, RLELossless

from casefile.ledger import Ledger
from casefile.models import load_model
from casefile.pipeline import RunSettings, explain_batch
from demo_cases.train import ENTRY_POINT
from tests.imaging.hostile import encapsulated_dicom, jpeg_frame, rle_frame, zero_png

ROOT = Path(__file__).resolve().parents[2]
RUN = RunSettings(patch=16, stride=8)


def _snapshot(led: Ledger) -> list[tuple[int, str, str]]:
    return [(e.seq, e.kind, e.hash) for e in led.entries()]


def test_oversized_inputs_are_recorded_as_failed_and_the_rest_is_untouched(tmp_path, few_inputs, honest,
                                                                           monkeypatch):
    monkeypatch.setenv("CASEFILE_CONFIG_DIR", str(tmp_path / "site-config"))
    for name in ("CASEFILE_MAX_PIXELS", "CASEFILE_MAX_FILE_PIXELS"):
        monkeypatch.delenv(name, raising=False)
    loaded = load_model(*honest, trusted_entry_points=[ENTRY_POINT])
    key = str(tmp_path / "site.key")
    led = Ledger(str(tmp_path / "l.db"))
    good = sorted(few_inputs.iterdir())[:2]
    first = explain_batch(led, good, loaded, RUN, key=key, progress=False)
    assert first.recorded == 2
    before = _snapshot(led)

    folder = tmp_path / "batch"
    folder.mkdir()
    zero_png(folder / "zeros.png", 12000, 12000)
    encapsulated_dicom(folder / "rle.dcm", RLELossless, rle_frame(), 60000, 60000)
    encapsulated_dicom(folder / "jpeg_inside.dcm", JPEGBaseline8Bit, jpeg_frame(64, 64, declared=(30000, 30000)),
                       64, 64)
    shutil.copy(sorted(few_inputs.iterdir())[2], folder / "good.dcm")
    summary = explain_batch(led, [folder], loaded, RUN, key=key, progress=False)

    assert summary.recorded == 1 and len(summary.failed) == 3
    reasons = {Path(p).name: why for p, why in summary.failed}
    assert "12000 x 12000 = 144.0 megapixels, above the limit of 100.0 megapixels per frame" in reasons["zeros.png"]
    assert "60000 x 60000 = 3600.0 megapixels" in reasons["rle.dcm"]
    assert "data declares 30000 x 30000" in reasons["jpeg_inside.dcm"]
    after = _snapshot(led)
    assert after[:len(before)] == before  # every earlier entry is exactly as it was
    new = [led.get(seq) for seq, _kind, _hash in after[len(before):]]
    failed = {e.body["file_name"]: e.body for e in new if e.kind == "failed"}
    assert set(failed) == {"zeros.png", "rle.dcm", "jpeg_inside.dcm"}
    assert all(b["stage"] == "load" and b["reason"] == reasons[n] for n, b in failed.items())
    assert led.verify().ok


def test_max_pixels_option_on_the_command_line(tmp_path, few_inputs, honest):
    env = {**os.environ, "CASEFILE_SITE_KEY": str(tmp_path / "site.key"),
           "CASEFILE_CONFIG_DIR": str(tmp_path / "site-config"), "CASEFILE_TRUSTED_ENTRY_POINTS": ENTRY_POINT}
    picture = sorted(p for p in few_inputs.iterdir() if p.suffix == ".png")[0]  # a 64 x 64 demo picture
    store = tmp_path / "l.db"
    args = [sys.executable, "-m", "casefile.cli", "--store", str(store), "explain", "--model", honest[0],
            "--card", honest[1], "--patch", "16", "--stride", "8", "-q", "--json"]
    refused = subprocess.run([*args, "--max-pixels", "4000", str(picture)], capture_output=True, text=True,
                             env=env, cwd=ROOT, timeout=600)
    assert refused.returncode == 1
    assert "64 x 64 = 4096 pixels, above the limit of 4000 pixels per frame" in refused.stdout
    bad = subprocess.run([*args, "--max-pixels", "0", str(picture)], capture_output=True, text=True, env=env,
                         cwd=ROOT, timeout=600)
    assert bad.returncode == 2 and "at least 1" in bad.stderr  # a usage error, before anything runs
    ok = subprocess.run([*args, "--max-pixels", "4096", str(picture)], capture_output=True, text=True, env=env,
                        cwd=ROOT, timeout=600)
    assert ok.returncode == 0, ok.stderr
    led = Ledger(str(store), create=False)
    assert led.count("failed") == 1 and led.count("case") == 1 and led.verify().ok
