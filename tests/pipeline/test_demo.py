"""The demo end to end: the planted shortcut is caught by region focus, the honest model is not flagged.

Outside sources: DICOM PS3.15 Annex E (the identifiers that must not reach the ledger), pypdf to read
the sheets; the flag-rate goals are the project's (issue acceptance), on our own synthetic scenario.
"""

from __future__ import annotations

import json

from pypdf import PdfReader

from casefile.ledger import Ledger


def _flag_rates(demo_dir):
    truth = json.loads((demo_dir / "scenario" / "truth.json").read_text())["files"]
    led = Ledger(str(demo_dir / "casefile.db"), create=False)
    rates: dict[str, dict[bool, list[int]]] = {}
    for e in led.entries(kind="case"):
        b = e.body
        focus = {c["name"]: c["outcome"] for c in b["checks"]}["region_focus"]
        marker = truth[b["input"]["file_name"]]["marker"]
        r = rates.setdefault(b["model"]["name"], {True: [0, 0], False: [0, 0]})
        r[marker][0] += focus in ("fail", "warn")
        r[marker][1] += 1
    return rates, led


def test_shortcut_flagged_where_marker_present_and_honest_model_passes(demo_dir):
    rates, led = _flag_rates(demo_dir)
    sc, hon = rates["casting-shortcut"], rates["casting-honest"]
    assert sc[True][1] == 20 and hon[True][1] == 20  # half the 40 demo cases carry the marker
    # issue 6 acceptance: >= 90 % of the shortcut model's marker cases flagged by region focus
    assert sc[True][0] / sc[True][1] >= 0.9
    # and the honest model flagged in at most 10 % of its cases (with or without the marker)
    flagged = hon[True][0] + hon[False][0]
    assert flagged / (hon[True][1] + hon[False][1]) <= 0.10
    assert led.verify().ok


def test_demo_left_sheets_seal_and_reviews(demo_dir):
    sheets = sorted((demo_dir / "sheets").rglob("*.pdf"))
    assert len(sheets) == 80  # 40 cases x 2 models
    led = Ledger(str(demo_dir / "casefile.db"), create=False)
    some = sheets[0]
    text = "".join(p.extract_text() for p in PdfReader(str(some)).pages)
    entry = led.case(some.stem).entry
    assert entry.hash in text.replace("\n", "")  # the verification code is the ledger entry hash
    assert led.count("draw") == 1 and led.count("review") >= 1 and led.count("seal") == 1
    assert led.verify(str(demo_dir / "seal.json"), public_key=str(demo_dir / "seal.key.pub")).ok


def test_no_direct_identifier_reaches_the_ledger_or_a_sheet(demo_dir):
    # the demo DICOM files carry a made-up PatientName, PatientID and InstitutionName (PS3.15 Annex E
    # attributes); none may appear in any entry body, any blob, or any sheet
    import sqlite3

    needles = [b"Casting^Lot7", b"PART-Lot7", b"Example Foundry"]
    dicoms = sorted((demo_dir / "scenario" / "inputs").glob("*.dcm"))
    assert dicoms and all(all(n in f.read_bytes() for n in needles) for f in dicoms)  # they are there to strip
    con = sqlite3.connect(demo_dir / "casefile.db")
    for (body,) in con.execute("SELECT body FROM entries"):
        assert not any(n in body.encode() for n in needles)
    for (data,) in con.execute("SELECT data FROM blobs"):
        assert not any(n in bytes(data) for n in needles)
    con.close()
    for pdf in (demo_dir / "sheets").rglob("*.pdf"):
        text = "".join(p.extract_text() for p in PdfReader(str(pdf)).pages).encode()
        assert not any(n in text for n in needles)
