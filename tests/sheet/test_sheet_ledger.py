"""Sheets read through the real Ledger API (DEVELOPERS.md), and many sheets written to a folder.

Outside sources: pypdf (reference library) to read the sheets back, the US Letter page size (612 pt
wide, 8.5 in x 72 pt); the Ledger API is casefile's own contract (DEVELOPERS.md).
"""

from __future__ import annotations

import io
import re

import pytest
from pypdf import PdfReader

from casefile import ledger as ledger_mod
from casefile.errors import CasefileError
from casefile.sheet import render_many, sheet_for_case, sheets_for_cases


def _strip(body: dict) -> dict:
    return {k: v for k, v in body.items() if k != "seq"}


@pytest.fixture()
def ledger(tmp_path, fx):
    led = ledger_mod.Ledger(str(tmp_path / "l.db"))
    case, blobs = fx.build_case()
    entry = led.append("case", case, blobs=list(blobs.values()))
    for r in fx.reviews(2):
        r = _strip(r)
        r["case_seq"] = entry.seq
        led.append("review", r)
    amend = _strip(fx.amendments()[0])
    amend.update(amends_seq=entry.seq, amends_hash=entry.hash)
    led.append("amendment", amend)
    return led, entry


def test_sheet_for_case_uses_the_ledger(ledger):
    led, entry = ledger
    pdf = sheet_for_case(led, entry.body["case_id"])
    text = " ".join(p.extract_text() for p in PdfReader(io.BytesIO(pdf)).pages)
    head_seq, _ = led.head()
    assert head_seq == entry.seq + 3
    assert f"as of ledger seq {head_seq}" in text
    assert entry.hash in re.sub(r"\s+", "", text)  # the verification code is the entry's own hash
    assert "reader-07" in text and "reader-12" in text
    assert "qa-lead-2" in text
    assert sheet_for_case(led, entry.body["case_id"]) == pdf  # reproducible from the ledger


def test_unknown_case_and_option_are_clear_errors(ledger):
    led, entry = ledger
    with pytest.raises(CasefileError, match="no case"):
        sheet_for_case(led, "c-nothere")
    with pytest.raises(CasefileError, match="unknown option"):
        sheet_for_case(led, entry.body["case_id"], colour="red")


def test_render_many_writes_one_file_per_case(tmp_path, fx, ledger):
    led, entry = ledger
    items = []
    for i in range(3):
        case, blobs = fx.build_case(case_id=f"c-{i:06d}", n_maps=1)
        items.append({"case": case, "blob": fx.BlobStore(blobs), "reviews": [], "as_of_seq": 5,
                      "entry_hash": fx.ENTRY_HASH})
    done = []
    paths = render_many(iter(items), tmp_path / "out", on_done=lambda cid, p: done.append(cid))
    assert [p.name for p in paths] == ["c-000000.pdf", "c-000001.pdf", "c-000002.pdf"]
    assert done == ["c-000000", "c-000001", "c-000002"]
    assert all(p.read_bytes().startswith(b"%PDF-") for p in paths)
    assert not list((tmp_path / "out").glob("*.part"))
    (p,) = sheets_for_cases(led, [entry.body["case_id"]], tmp_path / "led", page_size="letter")
    assert float(PdfReader(p).pages[0].mediabox.width) == pytest.approx(612.0)  # US Letter width in pt
