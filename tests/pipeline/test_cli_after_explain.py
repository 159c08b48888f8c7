"""The commands that read a ledger of real cases: sheet, export, audit, sample, review, stats.

Outside sources: DICOM PS3.4 B.5 (Encapsulated PDF Storage SOP Class), PS3.3 C.24.2 (Source Instance
Sequence), 21 CFR 11.10(e) (an amendment leaves the original visible).
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pydicom
from pypdf import PdfReader

from casefile.ledger import Ledger

from .conftest import copy_demo_ledger

ROOT = Path(__file__).resolve().parents[2]


def run(store: Path, *args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "casefile.cli", "--store", str(store), *args],
                          capture_output=True, text=True, cwd=ROOT)


def _case_of(led: Ledger, kind: str) -> dict:
    return next(r for r in led.cases() if r["file_name"].endswith(kind))


def test_sheet_and_export(demo_dir, tmp_path):
    store = copy_demo_ledger(demo_dir, tmp_path)
    led = Ledger(str(store), create=False)
    dcm_case, png_case = _case_of(led, ".dcm"), _case_of(led, ".png")
    out = tmp_path / "s.pdf"
    assert run(store, "sheet", dcm_case["case_id"], "-o", str(out)).returncode == 0
    assert dcm_case["case_id"] in PdfReader(str(out)).pages[0].extract_text()
    done = run(store, "export", dcm_case["case_id"], "--dicom", str(tmp_path / "s.dcm"))
    assert done.returncode == 0, done.stderr
    ds = pydicom.dcmread(tmp_path / "s.dcm")
    # PS3.4 B.5: Encapsulated PDF Storage SOP Class UID
    assert ds.SOPClassUID == "1.2.840.10008.5.1.4.1.1.104.1" and ds.Modality == "DOC"
    inp = led.case(dcm_case["case_id"]).entry.body["input"]
    assert ds.StudyInstanceUID == inp["study_uid"]
    # PS3.3 C.24.2 Source Instance Sequence points at the image the sheet explains
    assert ds.SourceInstanceSequence[0].ReferencedSOPInstanceUID == inp["sop_uid"]
    assert ds.SourceInstanceSequence[0].ReferencedSOPClassUID == inp["metadata"]["SOPClassUID"]
    # a PNG source has no study: the PDF is written and the reason given, exit 1
    done = run(store, "export", png_case["case_id"], "--dicom", str(tmp_path / "p.dcm"))
    assert done.returncode == 1 and "not a DICOM study" in done.stderr
    assert (tmp_path / "p.pdf").exists() and not (tmp_path / "p.dcm").exists()
    assert run(store, "sheet", "cf-nosuchcase0000").returncode == 1


def test_audit_sample_review_stats(demo_dir, tmp_path):
    store = copy_demo_ledger(demo_dir, tmp_path)
    led = Ledger(str(store), create=False)
    rows = [json.loads(x) for x in run(store, "audit", "--model", "casting-shortcut", "--json").stdout.splitlines()]
    assert len(rows) == 40 and {r["model_name"] for r in rows} == {"casting-shortcut"}
    fails = run(store, "audit", "--status", "fail", "--csv").stdout.splitlines()
    assert fails[0].startswith("seq,case_id") and len(fails) - 1 == len(led.cases(status="fail"))
    before = led.count()
    drawn = run(store, "sample", "--plan", "random", "--size", "5", "--seed", "3", "--json")
    assert drawn.returncode == 0, drawn.stderr
    body = json.loads(drawn.stdout)
    assert len(body["members"]) == 5 and led.count() == before + 1
    again = json.loads(run(store, "sample", "--plan", "random", "--size", "5", "--seed", "3", "--json").stdout)
    assert [m["case_id"] for m in again["members"]] == [m["case_id"] for m in body["members"]]
    cid = body["members"][0]["case_id"]
    assert run(store, "review", cid, "--reader", "qa-7", "--verdict", "agree").returncode == 0
    n = led.count()
    assert run(store, "review", cid, "--reader", "qa-7", "--verdict", "maybe").returncode == 2
    assert run(store, "review", "cf-nosuchcase0000", "--reader", "qa-7", "--verdict", "agree").returncode == 1
    assert run(store, "review", cid, "--reader", "  ", "--verdict", "agree").returncode == 1
    assert led.count() == n  # refusals wrote nothing
    stats = json.loads(run(store, "stats", "--json").stdout)
    assert isinstance(stats, dict) and stats
    assert led.verify().ok


def test_amend_keeps_the_original_and_history_shows_both(demo_dir, tmp_path):
    store = copy_demo_ledger(demo_dir, tmp_path)
    led = Ledger(str(store), create=False)
    case = led.cases()[0]
    before = led.get(case["seq"]).raw
    done = run(store, "amend", case["case_id"], "--author", "qa-lead", "--reason", "label corrected at review",
               "--label", "crack", "--json")
    assert done.returncode == 0, done.stderr
    assert led.get(case["seq"]).raw == before  # the original is untouched (21 CFR 11.10(e): not obscured)
    rows = [json.loads(x) for x in run(store, "history", case["case_id"], "--json").stdout.splitlines()]
    assert rows[0]["kind"] == "case" and rows[0]["seq"] == case["seq"]
    assert rows[-1]["kind"] == "amendment" and rows[-1]["changes"] == {"label": "crack"}
    assert run(store, "amend", case["case_id"], "--author", " ", "--reason", "x").returncode == 1
    assert led.verify().ok
