"""The sheet as a reader sees it on paper: pages drawn by poppler's pdftoppm, text read back with pypdf.

The region-of-interest line is looked for in the drawn page where the layout puts it; the text is
checked for Python's spelling of values (braces, None, True/False), which a reader must never see.

Outside sources: poppler's pdftoppm (reference renderer) and pypdf (reference library); no outside
source applies to which spellings a reader must never see, which is the project's rule.
"""

from __future__ import annotations

import io
import re
import shutil
import subprocess

import numpy as np
import pytest
from PIL import Image
from pypdf import PdfReader

from casefile.sheet import render_sheet, sheet_for_case
from casefile.sheet.draw import ROI_INK
from casefile.sheet.layout import MARGIN, PAGE_SIZES
from casefile.sheet.pictures import CAPTION_DROP, PANEL_GAP, panel_side

DPI = 100
PT = DPI / 72.0  # pixels per point: 72 points to the inch (PDF 32000-1, 8.3.2.3)
PYTHON_LOOKS = re.compile(r"[{}]|\bNone\b|\bTrue\b|\bFalse\b")
needs_poppler = pytest.mark.skipif(shutil.which("pdftoppm") is None, reason="poppler-utils (pdftoppm) not installed")


def _render(fx, *, reviews: int = 0, **kw) -> bytes:
    case, blobs = fx.build_case(**kw)
    return render_sheet(case, blob=fx.BlobStore(blobs), reviews=fx.reviews(reviews), as_of_seq=42,
                        entry_hash=fx.ENTRY_HASH)


def _flat(pdf: bytes) -> str:
    return re.sub(r"\s+", " ", " ".join(p.extract_text() for p in PdfReader(io.BytesIO(pdf)).pages))


def _placed(pdf: bytes) -> list[tuple[float, float, str]]:
    """(x, y, text) of each text piece on page 1, in PDF points from the lower left."""
    out: list[tuple[float, float, str]] = []

    def visit(text, cm, tm, _font, _size):
        if text.strip():
            out.append((tm[4] * cm[0] + tm[5] * cm[2] + cm[4], tm[4] * cm[1] + tm[5] * cm[3] + cm[5], text.strip()))

    PdfReader(io.BytesIO(pdf)).pages[0].extract_text(visitor_text=visit)
    return out


def _page_png(pdf: bytes, tmp_path) -> np.ndarray:
    src = tmp_path / "sheet.pdf"
    src.write_bytes(pdf)
    subprocess.run(["pdftoppm", "-r", str(DPI), "-f", "1", "-l", "1", "-png", str(src), str(tmp_path / "p")],
                   check=True, capture_output=True, timeout=60)
    (png,) = sorted(tmp_path.glob("p*.png"))
    return np.asarray(Image.open(png).convert("RGB")).astype(int)


def _roi_coloured(px: np.ndarray) -> np.ndarray:
    """Pixels whose colour is the ROI magenta (alone or blended into the picture by anti-aliasing):
    far more red and blue than green. Greys, the colour map (blue-teal-green-yellow) and the ink
    colours all fail this test (test_roi_colour_is_apart_from_the_colour_map)."""
    r, g, b = px[..., 0], px[..., 1], px[..., 2]
    return (r - g > 70) & (b - g > 40)


def _panel_top_left(pdf: bytes) -> tuple[float, float]:
    """Top-left corner (points) of the 'Image as displayed' panel: its title sits CAPTION_DROP below it."""
    x, y = next((x, y) for x, y, t in _placed(pdf) if t.startswith("Image as displayed"))
    side = panel_side(PAGE_SIZES["A4"][0] - 2 * MARGIN)
    return x, y + CAPTION_DROP + side


def test_roi_colour_is_apart_from_the_colour_map():
    from casefile.sheet.colours import colour_lut
    from casefile.sheet.draw import CAUTION_INK, GREY, INK

    assert not _roi_coloured(colour_lut().astype(int)).any()
    others = np.array([[c * 255 for c in col] for col in (INK, GREY, CAUTION_INK)] + [[255, 255, 255]])
    assert not _roi_coloured(others).any()
    assert _roi_coloured(np.array([[round(c * 255) for c in ROI_INK]])).all()


@needs_poppler
def test_the_card_region_of_interest_is_drawn_along_its_edge(fx, tmp_path):
    pdf = _render(fx)  # display 64 x 64, model input 64 x 64, ROI: all but an 8-pixel border
    page = _page_png(pdf, tmp_path)
    assert page.shape[1] == round(PAGE_SIZES["A4"][0] * PT) or abs(page.shape[1] - PAGE_SIZES["A4"][0] * PT) <= 1
    roi = _roi_coloured(page)
    side = panel_side(PAGE_SIZES["A4"][0] - 2 * MARGIN)
    x, top = _panel_top_left(pdf)
    h_px = page.shape[0]
    inset = side * 8 / 64  # 8 model-input pixels of 64, as a share of the picture
    for panel in range(2):  # the image as displayed and the Grad-CAM overlay
        left = x + panel * (side + PANEL_GAP)
        x_edge = round((left + inset) * PT)
        x_right = round((left + side - inset) * PT)
        y_top, y_bottom = round((h_px / PT - (top - inset)) * PT), round((h_px / PT - (top - side + inset)) * PT)
        rows = range(y_top + 4, y_bottom - 3)
        hits = [roi[r, x_edge - 2:x_edge + 3].any() for r in rows]
        assert np.mean(hits) > 0.4, f"panel {panel}: left edge"  # a dashed line, 3 pt on, 2 pt off
        hits = [roi[r, x_right - 2:x_right + 3].any() for r in rows]
        assert np.mean(hits) > 0.4, f"panel {panel}: right edge"
        cols = range(x_edge + 4, x_right - 3)
        assert np.mean([roi[y_top - 2:y_top + 3, c].any() for c in cols]) > 0.4, f"panel {panel}: top edge"
        middle = round((left + side / 2) * PT)
        assert not roi[y_top + 4:y_bottom - 3, middle - 2:middle + 3].any()  # nothing inside the region


@needs_poppler
def test_no_roi_line_when_the_record_has_no_rule(fx, tmp_path):
    pdf = _render(fx, roi=None)
    assert not _roi_coloured(_page_png(pdf, tmp_path)).any()
    assert "region of interest: not in this record" in _flat(pdf)
    assert "inside the dashed line" not in _flat(pdf)


def test_roi_words_in_the_legend(fx):
    text = _flat(_render(fx))
    assert "region of interest (card): inside the dashed line" in text
    assert "a border of 8 px of the 64 × 64 px model input left out" in text
    rect = _flat(_render(fx, roi={"rule": "rect", "x0": 4, "y0": 8, "x1": 60, "y1": 56}))
    assert "x 4 to 60 px, y 8 to 56 px of the 64 × 64 px model input" in rect
    assert "the whole picture" in _flat(_render(fx, roi={"rule": "whole"}))


BLUR_APPROX = {"patch": 16, "stride": 8, "fill": "blur", "blur_sigma": None, "grid": [4, 4], "output": "logit",
               "patch_used": [16, 16], "batch_size": 64, "batch_size_used": 16, "exact": False, "mode": "coarse-to-fine",
               "fidelity": 0.25, "summary": "patches were scored on a coarser grid than asked, to save time"}


def _fixture_sheets(fx) -> list[bytes]:
    """Fixture cases covering every method's parameters, dict thresholds, flags, weights and kinds."""
    case, blobs = fx.build_case(occlusion_params=BLUR_APPROX, flags=True, weights_pinned=False, n_classes=4)
    case["checks"][0]["threshold"] = {"pass": 0.5, "fail": 0.7}
    case["checks"][1]["value"] = None
    case["input"]["window"] = {"source": "file-lut", "lut_entries": 4096, "lut_first": 0}
    amendments = fx.amendments()
    amendments[0]["changes"].update({"model.roi": {"rule": "whole"}, "result.note": None})
    dict_case = render_sheet(case, blob=fx.BlobStore(blobs), reviews=fx.reviews(3), as_of_seq=42,
                             entry_hash=fx.ENTRY_HASH, amendments=amendments)
    return [dict_case, _render(fx, dicom=False, weights_pinned=True), _render(fx, roi=None, reviews=2)]


def test_no_braces_or_none_in_fixture_sheets(fx):
    for pdf in _fixture_sheets(fx):
        text = _flat(pdf)
        assert not PYTHON_LOOKS.search(text), PYTHON_LOOKS.search(text)


def test_no_braces_or_none_in_real_case_sheets(real_ledger):
    cases = [e.body for e in real_ledger.entries(kind="case")]
    assert {c["input"]["kind"] for c in cases} == {"dicom", "raster"}
    assert {m["method"] for c in cases for m in c["maps"]} == {"gradcam", "occlusion", "gradient"}
    for body in cases:
        text = _flat(sheet_for_case(real_ledger, body["case_id"]))
        assert not PYTHON_LOOKS.search(text), (body["case_id"], PYTHON_LOOKS.search(text))
        assert "patch 9 px, stride 4 px, fill: constant 0" in text  # the run's defaults for a 64 px input
        assert "top 3 of 4 classes" in text  # the demo cards name 4 classes; the record keeps the top 3
        assert ("DICOM, DX, 64 × 64 px" if body["input"]["kind"] == "dicom" else "raster image, 64 × 64 px") in text
        assert "a border of 8 px of the 64 × 64 px model input left out" in text  # model.roi from the card


def test_approximate_map_caption_and_dict_threshold(fx):
    text = _flat(_fixture_sheets(fx)[0])
    assert "Occlusion sensitivity, approximate" in text
    assert "approximate map (coarse to fine, fidelity 0.25)" in text
    assert "fill: blur σ 4 px (a quarter of the patch)" in text
    assert "pass 0.5, fail 0.7" in text


def test_result_panel_counts_the_classes_it_shows(fx):
    assert "top 3 of 4 classes" in _flat(_render(fx, n_classes=4))
    assert "all 3 classes" in _flat(_render(fx, n_classes=3))


def test_input_kind_words(fx):
    assert "scan-0007.dcm (DICOM, DX, 64 × 64 px)" in _flat(_render(fx))
    assert "bench-photo-0007.png (raster image, 64 × 64 px)" in _flat(_render(fx, dicom=False))
    case, blobs = fx.build_case(dicom=False)
    case["input"]["kind"], case["input"]["file_name"] = "array", "sha256:1a2b3c4d5e6f"
    text = _flat(render_sheet(case, blob=fx.BlobStore(blobs), as_of_seq=1, entry_hash=fx.ENTRY_HASH))
    assert "sha256:1a2b3c4d5e6f (picture from memory, 64 × 64 px)" in text  # a digest-derived name as is


def test_weights_pinned_words_beside_the_model_digest(fx):
    case, _ = fx.build_case()
    short = case["model"]["digest"][:12]
    unpinned = _placed(_render(fx, weights_pinned=False))
    (dx, dy) = next((x, y) for x, y, t in unpinned if t == short)
    note = next((x, y) for x, y, t in unpinned if t == "weights not pinned by the card")
    assert note[1] == pytest.approx(dy, abs=0.5) and note[0] > dx  # on the digest's line, after it
    assert "weights match the card's SHA-256" in _flat(_render(fx, weights_pinned=True))
    older = _flat(_render(fx))
    assert "pinned" not in older and "match the card" not in older  # older records do not say


def test_flags_are_said_near_the_result_and_marked_in_the_table(fx):
    pdf = _render(fx, flags=True)
    text = _flat(pdf)
    assert "Sent for a second read: region focus failed; notes: method agreement warned" in text
    assert "ROLE" in text and "role: a flag sends the case to a person, a note informs" in text
    placed = _placed(pdf)
    rx = next(x for x, _, t in placed if t == "RESULT")
    sent = next((x, y) for x, y, t in placed if t.startswith("Sent for a second read"))
    checks_y = next(y for _, y, t in placed if t == "Checks of the explanation")
    assert abs(sent[0] - rx) < 1 and sent[1] > checks_y  # in the result column, above the checks
    roles = [t for _, _, t in placed if t in ("flag", "note")]
    assert roles.count("flag") == 1 and roles.count("note") == 5
    plain = _flat(_render(fx))
    assert "ROLE" not in plain and "Sent for a second read" not in plain and "No flags" not in plain


def test_caution_follows_the_checks_not_the_page_bottom(fx):
    pdf = _render(fx, reviews=0)
    placed = _placed(pdf)
    y_of = {t: y for _, y, t in placed}
    last_check = min(y for _, y, t in placed if t == "confidence")  # the last row of the fixture's table
    caution = y_of["Read before use"]
    reviews = y_of["Second reads recorded so far"]
    assert reviews < caution < last_check
    assert last_check - caution < 40  # directly under the table: one row's height and the box's top
    footer = next(y for _, y, t in placed if t.startswith("page 1 of"))
    # the old layout pinned the box to the footer (its title about 80 pt above the footer line); now the
    # reviews follow it and the white space is left at the bottom, after everything
    assert reviews - footer > 100
