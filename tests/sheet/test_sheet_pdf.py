"""The PDF case sheet read back with pypdf (reference library) and drawn by poppler's pdftoppm."""

from __future__ import annotations

import io
import re
import shutil
import subprocess

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from PIL import Image
from pypdf import PdfReader

from casefile.errors import InputError
from casefile.sheet import CAUTIONS, render_sheet

A4_PT = (595.28, 841.89)  # ISO 216 A4, 210 x 297 mm at 72 pt per inch
LETTER_PT = (612.0, 792.0)  # US Letter, 8.5 x 11 in (ANSI/ASME Y14.1)


def _render(fx, n_reviews=2, **kw):
    case, blobs = fx.build_case(**{k: kw.pop(k) for k in ("n_maps", "dicom", "case_id") if k in kw})
    kw.setdefault("blob", fx.BlobStore(blobs))
    return render_sheet(case, reviews=fx.reviews(n_reviews), as_of_seq=42, entry_hash=fx.ENTRY_HASH, **kw)


def _text(pdf: bytes) -> list[str]:
    return [p.extract_text() for p in PdfReader(io.BytesIO(pdf)).pages]


def _flat(s: str) -> str:
    return re.sub(r"\s+", " ", s)


def test_text_holds_identity_result_checks_and_code(fx, sheet_pdf):
    (text,) = _text(sheet_pdf)
    case, _ = fx.build_case()
    assert case["case_id"] in text and "nodule" in text
    assert "model confidence 87.3%" in text
    for ch in case["checks"]:
        assert ch["name"] in text
    for word in ("pass", "warn", "fail", "not run"):
        assert word in text
    assert "as of ledger seq 42" in text
    assert fx.ENTRY_HASH in re.sub(r"\s+", "", text)
    assert "page 1 of 1" in text


def test_caution_text_on_the_sheet(sheet_pdf):
    flat = _flat(_text(sheet_pdf)[0])
    for sentence in CAUTIONS:
        assert _flat(sentence) in flat


def test_page_sizes_a4_and_letter(fx, sheet_pdf):
    box = PdfReader(io.BytesIO(sheet_pdf)).pages[0].mediabox
    assert float(box.width) == pytest.approx(A4_PT[0], abs=0.01)
    assert float(box.height) == pytest.approx(A4_PT[1], abs=0.01)
    box = PdfReader(io.BytesIO(_render(fx, page_size="letter"))).pages[0].mediabox
    assert (float(box.width), float(box.height)) == pytest.approx(LETTER_PT, abs=0.01)
    with pytest.raises(InputError, match="page size"):
        _render(fx, page_size="A3")


def test_fonts_are_embedded_and_metadata_set(sheet_pdf):
    reader = PdfReader(io.BytesIO(sheet_pdf))
    fonts = reader.pages[0]["/Resources"]["/Font"]
    assert len(fonts) >= 2
    for ref in fonts.values():
        font = ref.get_object()
        desc = font.get("/FontDescriptor") or font["/DescendantFonts"][0].get_object()["/FontDescriptor"]
        assert "/FontFile2" in desc.get_object()  # embedded TrueType program (PDF 32000-1, 9.9)
    meta = reader.metadata
    assert meta.title == "Case sheet c-000123"
    assert meta.creator.startswith("casefile ")
    assert "tiny-chest-net" in meta.subject


def test_same_input_same_bytes_and_only_dates_differ(fx, sheet_pdf):
    assert _render(fx) == sheet_pdf  # same data, same (record) time: identical bytes
    a = _render(fx, fixed_time="2026-04-01T08:00:00Z")
    b = _render(fx, fixed_time="2026-05-02T09:30:00Z")
    assert a != b
    assert b"D:20260401080000+00'00'" in a
    date = re.compile(rb"D:\d{14}\+00'00'")
    assert date.sub(b"D:X", a) == date.sub(b"D:X", b)  # the declared time stamps are the only change
    assert PdfReader(io.BytesIO(a)).metadata.creation_date.year == 2026


def test_long_reviews_continue_on_a_second_page_with_cautions_and_code(fx):
    pages = _text(_render(fx, n_reviews=30))
    assert len(pages) >= 2
    for i, text in enumerate(pages, start=1):
        assert f"page {i} of {len(pages)}" in text
        assert fx.ENTRY_HASH in re.sub(r"\s+", "", text)
        assert _flat(CAUTIONS[1]) in _flat(text)
    assert "reader-49" in pages[-1]
    assert "(continued)" in pages[1]


def test_up_to_three_maps_fit_one_page(fx):
    assert len(_text(_render(fx, n_reviews=2, n_maps=3))) == 1  # one page unless reviews are long


def test_amendments_are_shown_not_hidden(fx):
    text = _flat(" ".join(_text(_render(fx, amendments=fx.amendments()))))
    assert "Amendments recorded after this case" in text
    assert "1 recorded after this case (seq 15)" in text
    assert "model.version → 1.4.3" in text and "qa-lead-2" in text


def test_non_latin_notes_do_not_break_the_sheet(fx):
    text = _text(_render(fx))[0]
    assert "Привет" in text  # Cyrillic is in DejaVu Sans
    assert "Ünïcode" in text


def test_missing_or_altered_blob_is_said_in_words(fx):
    case, blobs = fx.build_case()
    altered = dict(blobs)
    altered[case["maps"][0]["raw_blob"]] = b"\x00" * 1024
    del altered[case["maps"][1]["raw_blob"]]
    text = _flat(_text(render_sheet(case, blob=fx.BlobStore(altered), reviews=[], as_of_seq=1,
                                    entry_hash=fx.ENTRY_HASH))[0])
    assert "blob does not match its recorded digest" in text
    assert "blob missing from the ledger" in text
    assert "No second read recorded yet." in text


def test_png_source_case_renders_without_mm_scale(fx):
    text = _flat(_text(_render(fx, dicom=False))[0])
    assert "pixel spacing unknown" in text and "none (not a DICOM study)" in text


@pytest.mark.skipif(shutil.which("pdftoppm") is None, reason="poppler-utils (pdftoppm) is not installed")
def test_pdftoppm_draws_the_sheet(tmp_path, sheet_pdf):
    src = tmp_path / "sheet.pdf"
    src.write_bytes(sheet_pdf)
    subprocess.run(["pdftoppm", "-r", "100", "-png", str(src), str(tmp_path / "p")], check=True,
                   capture_output=True, timeout=60)
    pngs = sorted(tmp_path.glob("p*.png"))
    assert len(pngs) == 1
    w, h = Image.open(pngs[0]).size
    # 100 dpi: A4 is 8.27 x 11.69 in (ISO 216) -> about 827 x 1169 pixels
    assert abs(w - 827) <= 1 and abs(h - 1169) <= 1
    grey = Image.open(pngs[0]).convert("L")
    assert grey.getextrema()[0] < 40  # there is dark ink on the page, not a blank render


def test_without_dejavu_the_sheet_falls_back_to_builtin_fonts(fx, tmp_path, monkeypatch):
    from casefile.sheet import fonts, layout

    fallback = fonts.font_set(str(tmp_path))  # an empty folder: no TrueType files there
    assert not fallback.embedded and fallback.regular == "Helvetica"
    monkeypatch.setattr(layout, "font_set", lambda: fallback)
    text = _text(_render(fx))[0]
    assert "c-000123" in text and fx.ENTRY_HASH in re.sub(r"\s+", "", text)


@settings(max_examples=12, deadline=None)
@given(note=st.text(max_size=200), reader=st.text(min_size=1, max_size=30))
def test_any_unicode_in_reviews_renders(fx, note, reader):
    case, blobs = fx.build_case(n_maps=1)
    pdf = render_sheet(case, blob=fx.BlobStore(blobs), reviews=[{"reader": reader, "verdict": "agree", "note": note}],
                       as_of_seq=3, entry_hash=fx.ENTRY_HASH)
    assert len(PdfReader(io.BytesIO(pdf)).pages) >= 1


def test_a_bare_case_still_renders_and_says_what_is_missing(fx):
    pdf = render_sheet({"case_id": "c-bare"}, blob=fx.BlobStore({}), as_of_seq=0, entry_hash="0" * 64)
    text = _flat(_text(pdf)[0])
    assert "c-bare" in text and "picture not available" in text and "none recorded" in text
    with pytest.raises(InputError, match="no case_id"):
        render_sheet({}, blob=fx.BlobStore({}), as_of_seq=0, entry_hash="0" * 64)
