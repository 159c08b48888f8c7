"""How the case sheet fits its page: one page for a typical case, readable rows, nothing running over.

Outside sources: pypdf (reference library) to read the pages back, ISO 216 A4 and US Letter page
sizes, and solid-set leading of at least 120 % of the type size (common practice in typesetting).
"""

from __future__ import annotations

import io
import re

from pypdf import PdfReader
from reportlab.pdfbase.pdfmetrics import stringWidth

from casefile.sheet import CAUTIONS, render_sheet
from casefile.sheet.draw import wrap, wrap_capped
from casefile.sheet.fonts import font_set

LONG_PSEUDONYM = "57b34ad2d90fc09ced6d43b294a3d01152fa3d26af4b8bea3b9b470c9a9df6df"  # 64 hex, as the demo writes
TAIL = "(full text in the ledger record)"


def _flat(s: str) -> str:
    return re.sub(r"\s+", " ", s)


def _render(fx, n_reviews: int, **case_kw) -> bytes:
    case, blobs = fx.build_case(**case_kw)
    return render_sheet(case, blob=fx.BlobStore(blobs), reviews=fx.reviews(n_reviews), as_of_seq=42,
                        entry_hash=fx.ENTRY_HASH)


def _placed_text(page) -> list[tuple[float, float, str, float]]:
    """(x, y, text, font size) of each piece of text pypdf reads from the page (user space points)."""
    out: list[tuple[float, float, str, float]] = []

    def visit(text, cm, tm, _font, size):
        if text.strip():
            x = tm[4] * cm[0] + tm[5] * cm[2] + cm[4]
            y = tm[4] * cm[1] + tm[5] * cm[3] + cm[5]
            out.append((x, y, text.strip(), size))

    page.extract_text(visitor_text=visit)
    return out


def test_the_long_use_fixture_really_wraps_to_five_lines(fx):
    # 205 pt is about the identity value column on A4 (a little over half of the 523 pt text width);
    # the check guards the fixture, so that the one-page test below is a real test of the cap.
    assert len(wrap(fx.LONG_USE, font_set().regular, 7.5, 205)) >= 5


def test_three_maps_six_checks_long_use_and_two_reviews_fit_one_page(fx):
    case, _ = fx.build_case(n_maps=3, intended_use=fx.LONG_USE)
    assert len(case["maps"]) == 3 and len(case["checks"]) == 6
    reader = PdfReader(io.BytesIO(_render(fx, 2, n_maps=3, intended_use=fx.LONG_USE)))
    assert len(reader.pages) == 1
    text = _flat(reader.pages[0].extract_text())
    assert "Second reads recorded so far" in text and "reader-07" in text and "reader-12" in text
    assert "Demonstration only" in text and TAIL in text
    assert "known failure modes" not in text  # the end of the long text is left to the ledger record
    assert "page 1 of 1" in text


def test_three_reviews_still_fit_the_first_page(fx):
    reader = PdfReader(io.BytesIO(_render(fx, 3, n_maps=3, intended_use=fx.LONG_USE, pseudonym=LONG_PSEUDONYM)))
    assert len(reader.pages) == 1
    assert "reader-22" in reader.pages[0].extract_text()


def test_no_review_yet_stays_on_page_one(fx):
    reader = PdfReader(io.BytesIO(_render(fx, 0, n_maps=3, intended_use=fx.LONG_USE, pseudonym=LONG_PSEUDONYM)))
    assert len(reader.pages) == 1
    assert "No second read recorded yet." in reader.pages[0].extract_text()


def test_thirty_reviews_take_more_pages_with_the_cautions_on_each(fx):
    pages = PdfReader(io.BytesIO(_render(fx, 30, n_maps=3, intended_use=fx.LONG_USE))).pages
    assert len(pages) >= 2
    for i, page in enumerate(pages, start=1):
        text = _flat(page.extract_text())
        for sentence in CAUTIONS:
            assert _flat(sentence) in text
        assert f"page {i} of {len(pages)}" in text
        assert fx.ENTRY_HASH in re.sub(r"\s+", "", page.extract_text())
    assert "reader-49" in pages[-1].extract_text()


def test_five_top_classes_are_on_separate_readable_rows(fx):
    case, blobs = fx.build_case()
    names = ["sound", "porosity", "shrinkage", "crack", "inclusion"]
    case["result"]["top"] = [{"label": n, "p": 0.3 - 0.05 * i} for i, n in enumerate(names)]
    pdf = render_sheet(case, blob=fx.BlobStore(blobs), reviews=[], as_of_seq=1, entry_hash=fx.ENTRY_HASH)
    placed = _placed_text(PdfReader(io.BytesIO(pdf)).pages[0])
    result_x = next(x for x, _, t, _ in placed if t == "RESULT")
    rows = sorted((y, size) for x, y, t, size in placed if t in names and abs(x - result_x) < 1)
    assert len(rows) == 5
    for (y0, size), (y1, _) in zip(rows, rows[1:], strict=False):
        # baselines at least 120 % of the type size apart: solid-set text with room for descenders
        # (common practice in typesetting)
        assert y1 - y0 >= 1.2 * size


def test_a_long_pseudonym_wraps_inside_the_identity_column(fx):
    pdf = _render(fx, 2, pseudonym=LONG_PSEUDONYM)
    placed = _placed_text(PdfReader(io.BytesIO(pdf)).pages[0])
    result_x = next(x for x, _, t, _ in placed if t == "RESULT")
    mono = font_set().mono
    pieces = [(x, t, size) for x, _, t, size in placed if len(t) >= 8 and t in LONG_PSEUDONYM]
    assert "".join(t for _, t, _ in pieces) == LONG_PSEUDONYM  # all of it printed, in order
    for x, t, size in pieces:
        assert x + stringWidth(t, mono, size) < result_x  # never over the result box


def test_wrap_capped_keeps_the_start_and_points_to_the_ledger():
    font = font_set().regular
    text = " ".join(f"word{i}" for i in range(200))
    lines = wrap_capped(text, font, 7.5, 150, 3, TAIL)
    assert len(lines) == 3 and " ".join(lines).endswith("… " + TAIL)
    assert " ".join(lines).startswith("word0 word1 word2")
    assert wrap_capped("short text", font, 7.5, 150, 3, TAIL) == ["short text"]
    digest = "ab" * 40
    for line in wrap(digest, font, 7.5, 100):
        assert stringWidth(line, font, 7.5) <= 100
    assert "".join(wrap(digest, font, 7.5, 100)) == digest
