"""The period report's charts, drawn as vector graphics with reportlab's own graphics package.

Every chart labels both axes with what they count and in which unit, and each series differs by marker
shape and line pattern as well as by colour, so a chart reads in grey print and with any colour vision.
Colours are the case sheet's: its ink, its orange for cautions, and its colour map (lightness rising
from deep blue through teal to green) at well separated lightness. A chart is only drawn when it has
data; the layout prints a sentence instead (``casefile.report.figures.sentences``).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

from reportlab.graphics.shapes import Circle, Drawing, Group, Line, Polygon, PolyLine, Rect, String
from reportlab.lib.colors import Color
from reportlab.pdfbase.pdfmetrics import stringWidth

from casefile.sheet.colours import colour_lut
from casefile.sheet.draw import BAND, CAUTION_INK, GREY, INK, RULE
from casefile.sheet.fonts import FontSet

Number = float | None


def _rgb(t: tuple[float, float, float]) -> Color:
    return Color(*t)


def _lut(f: float) -> Color:
    r, g, b = colour_lut()[int(round(f * 255))]
    return Color(r / 255, g / 255, b / 255)


# Series styles: colour, marker, dash pattern (None solid). Lightness: 15, 38, 47, 70, 44 (CIELAB L*).
SERIES: tuple[tuple[Color, str, tuple[float, ...] | None], ...] = (
    (_rgb(INK), "circle", None),
    (_rgb(CAUTION_INK), "square", (4, 2)),
    (_lut(0.42), "triangle", (1.2, 1.8)),
    (_lut(0.72), "diamond", (6, 2, 1.2, 2)),
    (_rgb(GREY), "cross", (2, 2)),
    (_lut(0.2), "down", (8, 3)),
)
# Stacked bars: fills of clearly different lightness (dark to light); more versions share the last.
FILLS: tuple[Color, ...] = (_lut(0.08), _lut(0.45), _lut(0.78), _rgb(GREY))
AXIS = _rgb(INK)
GRID = _rgb(RULE)
SOFT = _rgb(BAND)


@dataclass(frozen=True)
class Box:
    """The plot area inside a drawing, in points from the drawing's bottom-left."""

    x: float
    y: float
    w: float
    h: float

    def px(self, f: float) -> float:
        return self.x + self.w * f

    def py(self, f: float) -> float:
        return self.y + self.h * f


def _text(g: Group, x: float, y: float, s: str, font: str, size: float, anchor: str = "start",
          colour: Color = AXIS) -> None:
    g.add(String(x, y, s, fontName=font, fontSize=size, fillColor=colour, textAnchor=anchor))


def _marker(g: Group, kind: str, x: float, y: float, colour: Color, r: float = 2.4) -> None:
    if kind == "circle":
        g.add(Circle(x, y, r, fillColor=colour, strokeColor=colour, strokeWidth=0.6))
    elif kind == "square":
        g.add(Rect(x - r, y - r, 2 * r, 2 * r, fillColor=colour, strokeColor=colour, strokeWidth=0.6))
    elif kind == "triangle":
        g.add(Polygon([x - r * 1.15, y - r, x + r * 1.15, y - r, x, y + r * 1.2], fillColor=colour,
                      strokeColor=colour, strokeWidth=0.6))
    elif kind == "down":
        g.add(Polygon([x - r * 1.15, y + r, x + r * 1.15, y + r, x, y - r * 1.2], fillColor=None,
                      strokeColor=colour, strokeWidth=1.0))
    elif kind == "diamond":
        g.add(Polygon([x, y - r * 1.3, x + r * 1.3, y, x, y + r * 1.3, x - r * 1.3, y], fillColor=None,
                      strokeColor=colour, strokeWidth=1.1))
    else:  # cross
        g.add(Line(x - r, y - r, x + r, y + r, strokeColor=colour, strokeWidth=1.2))
        g.add(Line(x - r, y + r, x + r, y - r, strokeColor=colour, strokeWidth=1.2))


def nice_ceiling(v: float) -> float:
    """The smallest 1, 2 or 5 times a power of ten at or above ``v`` (for a count axis); 1 for v <= 0."""
    if v <= 0:
        return 1.0
    p = 10 ** math.floor(math.log10(v))
    for m in (1, 2, 5, 10):
        if m * p >= v - 1e-12:
            return m * p
    return 10 * p


def _y_axis(g: Group, box: Box, fonts: FontSet, top: float, label: str, percent: bool, ticks: int = 5) -> None:
    if not percent and top < ticks:
        ticks = max(1, int(top))  # a count axis shows whole numbers only
    for k in range(ticks + 1):
        f = k / ticks
        y = box.py(f)
        g.add(Line(box.x, y, box.x + box.w, y, strokeColor=GRID if k else AXIS, strokeWidth=0.4 if k else 0.8))
        v = top * f
        s = f"{v * 100:.0f}" if percent else f"{v:.0f}"
        _text(g, box.x - 3, y - 2.4, s, fonts.regular, 6.5, "end")
    g.add(Line(box.x, box.y, box.x, box.y + box.h, strokeColor=AXIS, strokeWidth=0.8))
    lab = String(0, 0, label, fontName=fonts.regular, fontSize=7, fillColor=AXIS, textAnchor="middle")
    turned = Group(lab)
    turned.translate(box.x - 26, box.py(0.5))
    turned.rotate(90)
    g.add(turned)


def _x_labels(g: Group, box: Box, fonts: FontSet, labels: Sequence[str], label: str) -> None:
    """Category labels under the slots (thinned so they never overlap) and the axis title."""
    n = len(labels)
    slot = box.w / max(n, 1)
    widest = max((stringWidth(s, fonts.regular, 6.5) for s in labels), default=0) + 4
    step = max(1, math.ceil(widest / slot))
    for i in range(0, n, step):
        x = box.x + slot * (i + 0.5)
        g.add(Line(x, box.y, x, box.y - 2, strokeColor=AXIS, strokeWidth=0.6))
        _text(g, x, box.y - 9, labels[i], fonts.regular, 6.5, "middle")
    _text(g, box.px(0.5), box.y - 20, label, fonts.regular, 7, "middle")


def _legend(g: Group, x: float, y: float, items: Sequence[tuple[str, int]], fonts: FontSet, *,
            bars: bool = False, right: float | None = None) -> None:
    """One row of legend items from ``x`` (wrapping before ``right``): a swatch or marker and its name."""
    cx, cy = x, y
    for name, i in items:
        w = 22 + stringWidth(name, fonts.regular, 6.8) + 10
        if right is not None and cx + w > right and cx > x:
            cx, cy = x, cy - 10
        if bars:
            g.add(Rect(cx, cy - 1, 12, 6, fillColor=FILLS[min(i, len(FILLS) - 1)], strokeColor=AXIS,
                       strokeWidth=0.4))
        else:
            colour, marker, dash = SERIES[i % len(SERIES)]
            g.add(Line(cx, cy + 2, cx + 16, cy + 2, strokeColor=colour, strokeWidth=1.2, strokeDashArray=dash))
            _marker(g, marker, cx + 8, cy + 2, colour)
        _text(g, cx + 20, cy, name, fonts.regular, 6.8)
        cx += w


def _frame(width: float, height: float, legend_rows: int = 1) -> tuple[Drawing, Group, Box]:
    d = Drawing(width, height)
    g = Group()
    d.add(g)
    top_pad = 8 + 10 * legend_rows
    return d, g, Box(40, 30, width - 48, height - 30 - top_pad)


def _unit_axes(g: Group, box: Box, fonts: FontSet, x_label: str, y_label: str) -> None:
    """A 0..1 x axis ticked every 0.1 and a 0..100 % y axis, both titled."""
    _y_axis(g, box, fonts, 1.0, y_label, percent=True)
    for k in range(11):
        x = box.px(k / 10)
        g.add(Line(x, box.y, x, box.y - 2, strokeColor=AXIS, strokeWidth=0.6))
        _text(g, x, box.y - 9, f"{k / 10:.1f}", fonts.regular, 6.5, "middle")
    _text(g, box.px(0.5), box.y - 20, x_label, fonts.regular, 7, "middle")


def stacked_bars(labels: Sequence[str], series: Mapping[str, Sequence[int]], fonts: FontSet, *, width: float,
                 height: float, x_label: str, y_label: str) -> Drawing:
    """Counts per category, one stacked bar per category, one fill per series (series beyond the
    fourth share the grey fill and should be merged by the caller)."""
    d, g, box = _frame(width, height)
    totals = [sum(v[i] for v in series.values()) for i in range(len(labels))]
    top = nice_ceiling(max(totals, default=0))
    _y_axis(g, box, fonts, top, y_label, percent=False)
    slot = box.w / max(len(labels), 1)
    bar = slot * 0.72
    for i in range(len(labels)):
        base = 0.0
        for k, values in enumerate(series.values()):
            v = values[i]
            if not v:
                continue
            y0, y1 = box.py(base / top), box.py((base + v) / top)
            g.add(Rect(box.x + slot * i + (slot - bar) / 2, y0, bar, y1 - y0,
                       fillColor=FILLS[min(k, len(FILLS) - 1)], strokeColor=Color(1, 1, 1), strokeWidth=0.5))
            base += v
    _x_labels(g, box, fonts, labels, x_label)
    _legend(g, box.x, height - 12, [(name, k) for k, name in enumerate(series)], fonts, bars=True,
            right=box.x + box.w)
    return d


def share_lines(labels: Sequence[str], series: Mapping[str, Sequence[Number]], fonts: FontSet, *, width: float,
                height: float, x_label: str, y_label: str, top: float | None = None) -> Drawing:
    """Shares (0..1) per category as lines with markers; a None value (no cases there) breaks the line."""
    rows = 1 + (len(series) > 4)
    d, g, box = _frame(width, height, legend_rows=rows)
    peak = max((v for vs in series.values() for v in vs if v is not None), default=0.0)
    top = top if top is not None else min(1.0, nice_ceiling(peak * 1.1) if peak > 0 else 0.1)
    _y_axis(g, box, fonts, top, y_label, percent=True)
    slot = box.w / max(len(labels), 1)
    for k, values in enumerate(series.values()):
        colour, marker, dash = SERIES[k % len(SERIES)]
        run: list[float] = []
        points = []
        for i, v in enumerate(values):
            if v is None:
                if len(run) >= 4:
                    g.add(PolyLine(run, strokeColor=colour, strokeWidth=1.1, strokeDashArray=dash))
                run = []
                continue
            x, y = box.x + slot * (i + 0.5), box.py(min(v, top) / top)
            run += [x, y]
            points.append((x, y))
        if len(run) >= 4:
            g.add(PolyLine(run, strokeColor=colour, strokeWidth=1.1, strokeDashArray=dash))
        if len(labels) <= 40:
            for x, y in points:
                _marker(g, marker, x, y, colour, r=2.0)
    _x_labels(g, box, fonts, labels, x_label)
    _legend(g, box.x, height - 12, [(name, k) for k, name in enumerate(series)], fonts, right=box.x + box.w)
    return d


def cumulative(grid: Sequence[float], curves: Mapping[str, Sequence[float] | None], fonts: FontSet, *,
               width: float, height: float, x_label: str, y_label: str,
               gap: tuple[float, float, float] | None = None) -> Drawing:
    """Cumulative shares over a 0..1 grid, one line each; ``gap`` (x, y_low, y_high) marks the largest
    distance between the curves (the Kolmogorov-Smirnov statistic) with a labelled bracket."""
    d, g, box = _frame(width, height)
    _unit_axes(g, box, fonts, x_label, y_label)
    shown = [(name, k) for k, (name, c) in enumerate(curves.items()) if c is not None]
    for name, k in shown:
        colour, marker, dash = SERIES[k % len(SERIES)]
        pts: list[float] = []
        for x, v in zip(grid, curves[name] or [], strict=True):
            pts += [box.px(x), box.py(v)]
        g.add(PolyLine(pts, strokeColor=colour, strokeWidth=1.3, strokeDashArray=dash))
        for j in range(0, len(grid), 10):
            _marker(g, marker, pts[2 * j], pts[2 * j + 1], colour, r=2.0)
    if gap is not None:
        x, lo, hi = gap
        gx = box.px(x)
        g.add(Line(gx, box.py(lo), gx, box.py(hi), strokeColor=AXIS, strokeWidth=1.6))
        for yy in (lo, hi):
            g.add(Line(gx - 3, box.py(yy), gx + 3, box.py(yy), strokeColor=AXIS, strokeWidth=1.0))
        right = x < 0.75
        _text(g, gx + (5 if right else -5), box.py((lo + hi) / 2) - 2, "largest gap D", fonts.bold, 6.8,
              "start" if right else "end")
    _legend(g, box.x, height - 12, shown, fonts, right=box.x + box.w)
    return d


def intervals(rows: Sequence[tuple[str, float, float, float]], fonts: FontSet, *, width: float,
              x_label: str, label_width: float = 150) -> Drawing:
    """One row per item: its rate as a dot and its interval as a bar, on a 0..top % scale."""
    row_h = 16.0
    height = 36 + row_h * len(rows)
    d = Drawing(width, height)
    g = Group()
    d.add(g)
    box = Box(label_width, 30, width - label_width - 12, row_h * len(rows))
    peak = max((hi for *_, hi in rows), default=0.0)
    top = min(1.0, nice_ceiling(peak * 1.05) if peak > 0 else 0.1)
    for k in range(6):
        f = k / 5
        _text(g, box.px(f), box.y - 9, f"{top * f * 100:.0f}", fonts.regular, 6.5, "middle")
    g.add(Line(box.x, box.y, box.x + box.w, box.y, strokeColor=AXIS, strokeWidth=0.8))
    _text(g, box.px(0.5), box.y - 20, x_label, fonts.regular, 7, "middle")
    for i in range(0, len(rows), 2):  # banded rows first, then the grid over them, then the intervals
        y = box.y + box.h - row_h * (i + 0.5)
        g.add(Rect(0, y - row_h / 2, width, row_h, fillColor=SOFT, strokeColor=None))
    for k in range(6):
        x = box.px(k / 5)
        g.add(Line(x, box.y, x, box.y + box.h, strokeColor=GRID, strokeWidth=0.4))
    for i, (name, rate, lo, hi) in enumerate(rows):
        y = box.y + box.h - row_h * (i + 0.5)
        _text(g, 4, y - 2.4, name, fonts.regular, 6.8)
        g.add(Line(box.px(lo / top), y, box.px(hi / top), y, strokeColor=AXIS, strokeWidth=1.4))
        for v in (lo, hi):
            g.add(Line(box.px(v / top), y - 3, box.px(v / top), y + 3, strokeColor=AXIS, strokeWidth=1.0))
        _marker(g, "circle", box.px(rate / top), y, AXIS, r=2.6)
    return d


def reliability_diagram(bins: Sequence[Mapping[str, float | int | None]], fonts: FontSet, *, width: float,
                        height: float, x_label: str, y_label: str) -> Drawing:
    """Per confidence bin a bar up to the share of readings that agreed, with its count above; the
    diagonal is where agreement equals confidence. Empty bins say "no readings"."""
    d, g, box = _frame(width, height)
    _unit_axes(g, box, fonts, x_label, y_label)
    for b in bins:
        lo, hi, n = float(b["low"] or 0), float(b["high"] or 0), int(b["n"] or 0)
        x0, x1 = box.px(lo), box.px(hi)
        mid = (x0 + x1) / 2
        if not n:
            _text(g, mid, box.py(0.5), "no", fonts.regular, 5.8, "middle", _rgb(GREY))
            _text(g, mid, box.py(0.5) - 7, "readings", fonts.regular, 5.8, "middle", _rgb(GREY))
            continue
        share, conf = float(b["agree_share"] or 0), float(b["mean_confidence"] or 0)
        g.add(Rect(x0 + 1.5, box.y, x1 - x0 - 3, box.h * share, fillColor=FILLS[1], strokeColor=AXIS,
                   strokeWidth=0.5))
        _marker(g, "diamond", box.px(conf), box.py(conf), AXIS, r=2.2)
        if share >= 0.1:  # the count sits inside the bar's foot, clear of the diagonal and the markers
            _text(g, mid, box.y + 4, f"n = {n}", fonts.bold, 6.2, "middle", Color(1, 1, 1))
        else:
            _text(g, mid, box.py(share) + 3, f"n = {n}", fonts.regular, 6.2, "middle")
    g.add(Line(box.px(0), box.py(0), box.px(1), box.py(1), strokeColor=AXIS, strokeWidth=0.8,
               strokeDashArray=(3, 2)))
    legend_y = height - 12
    g.add(Rect(box.x, legend_y - 1, 12, 6, fillColor=FILLS[1], strokeColor=AXIS, strokeWidth=0.4))
    _text(g, box.x + 16, legend_y, "share of readings agreeing with the model", fonts.regular, 6.8)
    lx = box.x + 26 + stringWidth("share of readings agreeing with the model", fonts.regular, 6.8)
    g.add(Line(lx, legend_y + 2, lx + 16, legend_y + 2, strokeColor=AXIS, strokeWidth=0.8, strokeDashArray=(3, 2)))
    _text(g, lx + 20, legend_y, "agreement equal to confidence", fonts.regular, 6.8)
    lx2 = lx + 30 + stringWidth("agreement equal to confidence", fonts.regular, 6.8)
    _marker(g, "diamond", lx2 + 4, legend_y + 2, AXIS, r=2.2)
    _text(g, lx2 + 10, legend_y, "mean confidence of the bin", fonts.regular, 6.8)
    return d


def share_bar(value: float, width: float, height: float = 6.0) -> Drawing:
    """A small horizontal bar for a share (0..1), for a table cell."""
    d = Drawing(width, height)
    d.add(Rect(0, 0, width, height, fillColor=SOFT, strokeColor=None))
    d.add(Rect(0, 0, width * max(0.0, min(1.0, value)), height, fillColor=FILLS[0], strokeColor=None))
    return d


__all__ = ["FILLS", "SERIES", "cumulative", "intervals", "nice_ceiling", "reliability_diagram", "share_bar",
           "share_lines", "stacked_bars"]
