"""Drawing helpers for the case sheet: text wrapping, outcome marks, tables split into rows, page flow."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

from reportlab.lib.utils import simpleSplit
from reportlab.pdfbase.pdfmetrics import stringWidth
from reportlab.pdfgen.canvas import Canvas

from .fonts import FontSet, clean

INK = (0.10, 0.11, 0.13)
GREY = (0.42, 0.44, 0.47)
RULE = (0.78, 0.80, 0.82)
BAND = (0.93, 0.94, 0.95)
CAUTION_INK = (0.62, 0.22, 0.0)  # short cautions beside a value: a dark orange, always with words
# The region-of-interest line: a strong magenta, a hue the colour map never takes (it runs from blue
# through teal and green to yellow), drawn dashed so it differs by shape as well as by colour.
ROI_INK = (0.80, 0.0, 0.55)

OUTCOME_WORDS = {"pass": "pass", "warn": "warn", "fail": "fail", "not-run": "not run"}


def _break_long(line: str, font: str, size: float, width: float) -> list[str]:
    """A line with no space to break at (a digest, a long name) cut by characters to fit ``width``."""
    out: list[str] = []
    while line and stringWidth(line, font, size) > width:
        k = max(1, int(len(line) * width / stringWidth(line, font, size)))
        while k > 1 and stringWidth(line[:k], font, size) > width:
            k -= 1
        out.append(line[:k])
        line = line[k:]
    return [*out, line] if line or not out else out


def wrap(text: str, font: str, size: float, width: float) -> list[str]:
    """Lines of ``text`` that fit ``width`` points; explicit newlines start new lines, and a word
    wider than the column is cut by characters rather than run into the next column."""
    lines: list[str] = []
    for para in text.split("\n"):
        for line in simpleSplit(para, font, size, width) or [""]:
            lines.extend(_break_long(line, font, size, width))
    return lines


def wrap_capped(text: str, font: str, size: float, width: float, max_lines: int, tail: str) -> list[str]:
    """``wrap`` kept to ``max_lines`` lines; when cut, the last line ends with an ellipsis and ``tail``."""
    lines = wrap(text, font, size, width)
    if len(lines) <= max_lines:
        return lines
    words = " ".join(lines[:max_lines]).split(" ")
    while words:
        cut = wrap(" ".join(words) + " … " + tail, font, size, width)
        if len(cut) <= max_lines:
            return cut
        words.pop()
    return wrap("… " + tail, font, size, width)[:max_lines]


def outcome_mark(c: Canvas, x: float, y: float, outcome: str, s: float = 7.0, *, font: str = "Helvetica-Bold",
                 ) -> None:
    """A shape for the outcome, centred at (x, y): filled circle pass, open triangle warn,
    square with a cross fail, dash not-run; unknown outcomes get a question mark."""
    c.saveState()
    c.setStrokeColorRGB(*INK)
    c.setFillColorRGB(*INK)
    c.setLineWidth(1.0)
    r = s / 2
    if outcome == "pass":
        c.circle(x, y, r, stroke=0, fill=1)
    elif outcome == "warn":
        p = c.beginPath()
        p.moveTo(x - r, y - r * 0.85)
        p.lineTo(x + r, y - r * 0.85)
        p.lineTo(x, y + r)
        p.close()
        c.setLineWidth(1.1)
        c.drawPath(p, stroke=1, fill=0)
    elif outcome == "fail":
        c.rect(x - r, y - r, s, s, stroke=1, fill=0)
        c.line(x - r, y - r, x + r, y + r)
        c.line(x - r, y + r, x + r, y - r)
    elif outcome == "not-run":
        c.setLineWidth(1.6)
        c.line(x - r, y, x + r, y)
    else:
        c.setFont(font, s * 1.2)
        c.drawCentredString(x, y - r * 0.8, "?")
    c.restoreState()


@dataclass
class Block:
    """A piece of a page: its height in points and how to draw it with its top-left at (x, y)."""

    height: float
    draw: Callable[[Canvas, float, float], None]
    keep_with_next: bool = False


@dataclass
class Column:
    title: str
    width: float
    font: str = "regular"  # a FontSet field name
    align: str = "left"


@dataclass
class Table:
    """A table drawn row by row, so that it can continue on the next page with its header repeated."""

    columns: Sequence[Column]
    fonts: FontSet
    size: float = 7.5
    leading: float = 8.8
    pad: float = 2.6
    special: dict[int, Callable[[Canvas, float, float, float, str], None]] = field(default_factory=dict)

    def _cell_lines(self, text: str, col: Column) -> list[str]:
        font = getattr(self.fonts, col.font)
        return wrap(clean(text, font, keep_newlines=True), font, self.size, col.width - 2 * self.pad)

    def header(self) -> Block:
        h = self.leading + 2 * self.pad

        def draw(c: Canvas, x: float, y: float) -> None:
            total = sum(col.width for col in self.columns)
            c.setFillColorRGB(*BAND)
            c.rect(x, y - h, total, h, stroke=0, fill=1)
            c.setFillColorRGB(*GREY)
            c.setFont(self.fonts.bold, self.size - 0.5)
            cx = x
            for col in self.columns:
                c.drawString(cx + self.pad, y - self.pad - self.size + 0.5, col.title)
                cx += col.width

        return Block(h, draw, keep_with_next=True)

    def row(self, cells: Sequence[str]) -> Block:
        wrapped = [self._cell_lines(str(t), col) for t, col in zip(cells, self.columns, strict=True)]
        h = max(len(ls) for ls in wrapped) * self.leading + 2 * self.pad

        def draw(c: Canvas, x: float, y: float) -> None:
            total = sum(col.width for col in self.columns)
            cx = x
            for i, (lines, col) in enumerate(zip(wrapped, self.columns, strict=True)):
                if i in self.special:
                    self.special[i](c, cx, y - self.pad, col.width, cells[i])
                else:
                    font = getattr(self.fonts, col.font)
                    c.setFont(font, self.size)
                    c.setFillColorRGB(*INK)
                    for k, line in enumerate(lines):
                        ty = y - self.pad - self.size - k * self.leading + 1
                        if col.align == "right":
                            c.drawRightString(cx + col.width - self.pad, ty, line)
                        else:
                            c.drawString(cx + self.pad, ty, line)
                cx += col.width
            c.setStrokeColorRGB(*RULE)
            c.setLineWidth(0.5)
            c.line(x, y - h, x + total, y - h)

        return Block(h, draw)


def paginate(blocks: Sequence[Block], first: float, later: float, repeat: Callable[[int], list[Block]]) -> list[
        list[Block]]:
    """Put blocks on pages: ``first``/``later`` are the usable heights; ``repeat(i)`` gives blocks to
    start a continuation page with (for instance a table header), given the index of the next block."""
    pages: list[list[Block]] = [[]]
    room, fresh, i = first, True, 0
    while i < len(blocks):
        need, j = blocks[i].height, i
        while blocks[j].keep_with_next and j + 1 < len(blocks):  # keep headings with what follows
            j += 1
            need += blocks[j].height
        if need <= room or fresh:  # a block taller than a page goes on a fresh page anyway
            pages[-1].append(blocks[i])
            room -= blocks[i].height
            fresh = blocks[i].keep_with_next and fresh
            i += 1
            continue
        pages.append(list(repeat(i)))
        room, fresh = later - sum(rb.height for rb in pages[-1]), True
    return pages


def text_line(c: Canvas, x: float, y: float, text: str, font: str, size: float,
              colour: tuple[float, float, float] = INK) -> None:
    c.setFont(font, size)
    c.setFillColorRGB(*colour)
    c.drawString(x, y, clean(text, font))
