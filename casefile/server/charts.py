"""The summary page's pictures as SVG text drawn on the server: disagreement per draw with its Wilson
interval, and the reliability diagram (model confidence against the share of readings that agreed).

Every number placed comes from ``casefile.review.stats.summarise``; nothing is computed here but
positions. Each mark carries its values as ``data-`` attributes and a ``<title>`` a pointer shows.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from html import escape
from typing import Any

INK = "#1f2329"
GRID = "#c9ced6"
MARK = "#2b5c8a"  # a dark blue; readable for the common colour-vision deficiencies and in grey print
BAR = "#9db8d3"
FONT = "font-family=\"DejaVu Sans, sans-serif\""

RATE_LEFT, RATE_WIDTH, RATE_ROW, RATE_TOP = 230, 380, 34, 30


def rate_x(value: float) -> float:
    """Horizontal position of a rate in the per-draw chart."""
    return RATE_LEFT + RATE_WIDTH * float(value)


def _text(x: float, y: float, words: str, *, size: int = 12, anchor: str = "start", weight: str = "normal") -> str:
    return (f'<text x="{x:.1f}" y="{y:.1f}" font-size="{size}" text-anchor="{anchor}" font-weight="{weight}" '
            f'fill="{INK}" {FONT}>{escape(words)}</text>')


def _pct(v: float) -> str:
    return f"{100 * v:.0f} %" if v >= 0.1 or v == 0 else f"{100 * v:.1f} %"


def draw_rates_svg(draws: Sequence[Mapping[str, Any]]) -> str:
    """One row per draw: the disagreement rate among its reviewed members (dot) and its 95 % Wilson
    interval (line), on a 0..1 axis; a draw with no readings says so, and a draw marked
    ``waiting_for_you`` shows no figure until the reader has read their cases in it."""
    height = RATE_TOP + RATE_ROW * max(len(draws), 1) + 44
    width = RATE_LEFT + RATE_WIDTH + 40
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" class="chart" role="img" width="{width}" '
             f'height="{height}" viewBox="0 0 {width} {height}" aria-labelledby="rates-title">',
             '<title id="rates-title">Share of reviewed cases a reader disagreed with, per draw, '
             'with the 95 % Wilson interval</title>']
    bottom = height - 44
    for tick in (0.0, 0.25, 0.5, 0.75, 1.0):
        x = rate_x(tick)
        parts.append(f'<line x1="{x:.1f}" y1="{RATE_TOP - 10}" x2="{x:.1f}" y2="{bottom}" stroke="{GRID}" />')
        parts.append(_text(x, bottom + 16, _pct(tick), size=11, anchor="middle"))
    parts.append(_text(RATE_LEFT + RATE_WIDTH / 2, bottom + 34, "share of reviewed cases with a disagreement",
                       size=12, anchor="middle"))
    if not draws:
        parts.append(_text(RATE_LEFT, RATE_TOP + 14, "no draws yet"))
    for i, d in enumerate(draws):
        y = RATE_TOP + RATE_ROW * i + RATE_ROW / 2
        parts.append(_text(8, y - 2, f"{d['draw_id']} ({d['plan']})", size=12, weight="bold"))
        k, n = d["disagreements"], d["reviewed"]
        if d.get("waiting_for_you"):
            parts.append(_text(8, y + 12, f"{d['members']} drawn", size=11))
            parts.append(_text(RATE_LEFT + 6, y + 4, f"shown once you have read your {d['waiting_for_you']} "
                               "waiting case(s)", size=12))
            continue
        parts.append(_text(8, y + 12, f"{k} of {n} reviewed, {d['members']} drawn", size=11))
        if d.get("rate") is None:
            parts.append(_text(RATE_LEFT + 6, y + 4, "no readings yet", size=12))
            continue
        low, high = d["wilson_95"]
        rate = d["rate"]
        tip = escape(f"{d['draw_id']}: {k} of {n} = {_pct(rate)}; 95 % Wilson interval {_pct(low)} to {_pct(high)}")
        parts.append(f'<g class="rate" data-draw="{escape(d["draw_id"])}" data-rate="{rate:.6f}" '
                     f'data-low="{low:.6f}" data-high="{high:.6f}"><title>{tip}</title>'
                     f'<line x1="{rate_x(low):.2f}" y1="{y:.1f}" x2="{rate_x(high):.2f}" y2="{y:.1f}" '
                     f'stroke="{MARK}" stroke-width="3" />'
                     f'<line x1="{rate_x(low):.2f}" y1="{y - 7:.1f}" x2="{rate_x(low):.2f}" y2="{y + 7:.1f}" '
                     f'stroke="{MARK}" stroke-width="2" />'
                     f'<line x1="{rate_x(high):.2f}" y1="{y - 7:.1f}" x2="{rate_x(high):.2f}" y2="{y + 7:.1f}" '
                     f'stroke="{MARK}" stroke-width="2" />'
                     f'<circle cx="{rate_x(rate):.2f}" cy="{y:.1f}" r="6" fill="{MARK}" stroke="white" '
                     'stroke-width="1.5" /></g>')
    parts.append("</svg>")
    return "".join(parts)


REL_LEFT, REL_TOP, REL_SIZE = 64, 20, 320


def rel_x(value: float) -> float:
    return REL_LEFT + REL_SIZE * float(value)


def rel_y(value: float) -> float:
    return REL_TOP + REL_SIZE * (1.0 - float(value))


def reliability_svg(rel: Mapping[str, Any] | None) -> str:
    """Bins of model confidence (x) against the share of readings in the bin that agreed with the model
    (y): a bar per bin with readings, a dot at the bin's mean confidence, the count above; the diagonal
    is where agreement would match confidence. Bins without readings stay empty."""
    width, height = REL_LEFT + REL_SIZE + 30, REL_TOP + REL_SIZE + 56
    parts = [f'<svg xmlns="http://www.w3.org/2000/svg" class="chart" role="img" width="{width}" '
             f'height="{height}" viewBox="0 0 {width} {height}" aria-labelledby="rel-title">',
             '<title id="rel-title">Reliability: model confidence against the share of readings that agreed '
             'with the model</title>']
    for tick in (0.0, 0.2, 0.4, 0.6, 0.8, 1.0):
        parts.append(f'<line x1="{rel_x(0):.1f}" y1="{rel_y(tick):.1f}" x2="{rel_x(1):.1f}" y2="{rel_y(tick):.1f}" '
                     f'stroke="{GRID}" />')
        parts.append(f'<line x1="{rel_x(tick):.1f}" y1="{rel_y(0):.1f}" x2="{rel_x(tick):.1f}" y2="{rel_y(1):.1f}" '
                     f'stroke="{GRID}" />')
        parts.append(_text(rel_x(0) - 6, rel_y(tick) + 4, f"{tick:.1f}", size=11, anchor="end"))
        parts.append(_text(rel_x(tick), rel_y(0) + 16, f"{tick:.1f}", size=11, anchor="middle"))
    parts.append(_text(rel_x(0.5), rel_y(0) + 36, "model confidence", anchor="middle"))
    parts.append(f'<text x="16" y="{rel_y(0.5):.1f}" font-size="12" text-anchor="middle" fill="{INK}" {FONT} '
                 f'transform="rotate(-90 16 {rel_y(0.5):.1f})">share of readings agreeing</text>')
    for b in (rel or {}).get("bins", []):
        if not b["n"]:
            continue
        share, conf = b["agree_share"], b["mean_confidence"]
        tip = escape(f"confidence {b['low']:.1f} to {b['high']:.1f}: {b['n']} readings, "
                     f"{_pct(share)} agreed, mean confidence {conf:.2f}")
        top = rel_y(share)
        parts.append(f'<g class="bin" data-low="{b["low"]:.3f}" data-high="{b["high"]:.3f}" data-n="{b["n"]}" '
                     f'data-share="{share:.6f}" data-confidence="{conf:.6f}"><title>{tip}</title>'
                     f'<rect x="{rel_x(b["low"]) + 1:.2f}" y="{top:.2f}" width="{REL_SIZE * (b["high"] - b["low"]) - 2:.2f}" '
                     f'height="{rel_y(0) - top:.2f}" fill="{BAR}" stroke="{MARK}" />'
                     f'<circle cx="{rel_x(conf):.2f}" cy="{top:.2f}" r="4" fill="{MARK}" />'
                     + _text(rel_x((b["low"] + b["high"]) / 2), top - 6, f"n={b['n']}", size=10, anchor="middle")
                     + "</g>")
    # the diagonal goes over the bars, so it shows where a bar crosses it
    parts.append(f'<line x1="{rel_x(0):.1f}" y1="{rel_y(0):.1f}" x2="{rel_x(1):.1f}" y2="{rel_y(1):.1f}" '
                 f'stroke="{INK}" stroke-dasharray="5 4" />')
    if not (rel or {}).get("n"):
        parts.append(_text(rel_x(0.5), rel_y(0.5), "no agree or disagree readings yet", anchor="middle"))
    parts.append("</svg>")
    return "".join(parts)


__all__ = ["draw_rates_svg", "rate_x", "rel_x", "rel_y", "reliability_svg"]
