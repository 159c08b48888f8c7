"""The caution box of the case sheet: on every page, placed where the reader's eye goes after the result.

On the page where the checks table ends it follows the table directly; on any other page it follows
the last thing on that page. The page flow reserves its height on every page, so it always fits.
"""

from __future__ import annotations

from collections.abc import Sequence

from reportlab.pdfgen.canvas import Canvas

from casefile.cautions import CAUTION_TITLE, CAUTIONS

from .draw import INK, Block, text_line, wrap
from .fonts import FontSet, clean

LEADING = 8.8
SIZE = 7.5
TOP_GAP = 6.0  # points between what comes before and the box


def caution_block(fonts: FontSet, width: float, sentences: Sequence[str] = CAUTIONS,
                  title: str = CAUTION_TITLE) -> Block:
    """The boxed caution sentences, with a heavy top rule, as one block ``width`` points wide (the case
    sheet's sentences unless others are given, e.g. the period report's)."""
    lines: list[str] = []
    for sentence in sentences:
        lines.extend(wrap(clean(sentence, fonts.regular), fonts.regular, SIZE, width - 20))
    box_h = 20 + LEADING * len(lines)

    def draw(c: Canvas, x: float, y: float) -> None:
        y0 = y - TOP_GAP - box_h
        c.setStrokeColorRGB(*INK)
        c.setLineWidth(1.2)
        c.setFillColorRGB(1, 1, 1)
        c.rect(x, y0, width, box_h, stroke=1, fill=1)
        c.setFillColorRGB(*INK)
        c.rect(x, y0 + box_h - 3, width, 3, stroke=0, fill=1)
        text_line(c, x + 10, y0 + box_h - 14, title, fonts.bold, 8.5)
        yy = y0 + box_h - 24
        for line in lines:
            text_line(c, x + 10, yy, line, fonts.regular, SIZE)
            yy -= LEADING

    return Block(TOP_GAP + box_h, draw)


def place_caution(pages: list[list[Block]], caution: Block, anchor: Block | None) -> list[list[Block]]:
    """Each page with the caution inserted: right after ``anchor`` (the last row of the checks table)
    on the page that holds it, at the end of the content on every other page."""
    out = []
    for page in pages:
        at = next((i + 1 for i, b in enumerate(page) if b is anchor), len(page)) if anchor is not None \
            else len(page)
        out.append([*page[:at], caution, *page[at:]])
    return out

