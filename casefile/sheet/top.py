"""The top of the case sheet: its title, the case's identity and the result beside it."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

from reportlab.pdfbase.pdfmetrics import stringWidth
from reportlab.pdfgen.canvas import Canvas

from casefile.flags import worst

from . import words
from .draw import (
    BAND,
    CAUTION_INK,
    GREY,
    INK,
    OUTCOME_WORDS,
    RULE,
    Block,
    outcome_mark,
    text_line,
    wrap,
    wrap_capped,
)
from .fonts import FontSet, clean

USE_LINES = 3  # lines of the intended-use text printed on the sheet; the ledger keeps the whole text
USE_TAIL = "(full text in the ledger record)"
TOP_ROW = 12.0  # points between the rows of top classes in the result box


def _fmt_time(t: Any) -> str:
    s = str(t or "—")
    return s.replace("T", " ").replace("Z", " UTC") if s.endswith("Z") else s


def _short(d: Any) -> str:
    return str(d)[:12] if d else "—"


Row = tuple  # (label, value, font field) or (label, value, font field, note, note colour)


def _kv_block(fonts: FontSet, title: str, rows: Sequence[Row], width: float,
              capped: frozenset[str] = frozenset()) -> tuple[float, Callable[[Canvas, float, float], None]]:
    """A titled list of label/value pairs; the third item names the value font. A row may carry a short
    note (and its colour) printed in bold after the value, on the same line when it fits. Values of
    the labels in ``capped`` are kept to ``USE_LINES`` lines, ending with a pointer to the ledger record."""
    label_w = 76.0
    size, leading = 7.5, 9.2
    room = width - label_w

    def lines(k: str, v: str, f: str) -> list[str]:
        font = getattr(fonts, f)
        if k in capped:
            return wrap_capped(clean(v, font), font, size, room, USE_LINES, USE_TAIL)
        return wrap(clean(v, font), font, size, room)

    laid = []
    for row in rows:
        k, v, f = row[:3]
        note, colour = (row[3], row[4]) if len(row) >= 5 and row[3] else ("", INK)
        ls = [(ln, getattr(fonts, f), INK, 0.0) for ln in lines(k, v, f)]
        if note:
            note = clean(note, fonts.bold)
            end = stringWidth(ls[-1][0], ls[-1][1], size) + 8 if ls else 0.0
            if end + stringWidth(note, fonts.bold, size) <= room:
                ls.append((note, fonts.bold, colour, end))  # same line, after the value
            else:
                ls += [(ln, fonts.bold, colour, 0.0) for ln in wrap(note, fonts.bold, size, room)]
        laid.append((k, ls))
    h = 14 + sum(sum(1 for *_, dx in ls if dx == 0.0) for _, ls in laid) * leading

    def draw(c: Canvas, x: float, y: float) -> None:
        text_line(c, x, y - 9, title.upper(), fonts.bold, 7.5, GREY)
        yy = y - 14 - size
        for k, ls in laid:
            text_line(c, x, yy, k, fonts.regular, size, GREY)
            for i, (line, font, colour, dx) in enumerate(ls):
                if dx and i:
                    yy += leading  # back to the value's line
                text_line(c, x + label_w + dx, yy, line, font, size, colour)
                yy -= leading

    return h, draw


def identity_result(case: dict, fonts: FontSet, width: float, amendments: Sequence[dict] = ()) -> Block:
    inp, model, res = case.get("input") or {}, case.get("model") or {}, case.get("result") or {}
    sw = case.get("software") or {}
    left_w = width * 0.56
    weights = words.weights(model)
    digest_row: tuple = ("Model digest", _short(model.get("digest")), "mono")
    if weights is not None:
        digest_row = (*digest_row, weights[0], CAUTION_INK if weights[1] else GREY)
    shown = [words.kind(inp.get("kind"))]
    if inp.get("kind") == "dicom" and inp.get("modality"):
        shown.append(str(inp["modality"]))
    shown.append(f"{inp.get('width', '?')} × {inp.get('height', '?')} px")
    if isinstance(inp.get("frame"), int) and not isinstance(inp.get("frame"), bool):
        shown.append(f"frame {inp['frame']}")
    ident: list[tuple] = [
        ("Case", str(case.get("case_id", "—")), "mono"),
        ("Recorded", _fmt_time(case.get("recorded_at")), "regular"),
        ("Model", f"{model.get('name', '—')}  version {model.get('version', '—')}", "regular"),
        digest_row,
        ("Input digest", _short(inp.get("file_sha256")), "mono"),
        ("Input", f"{inp.get('file_name') or '—'}  ({', '.join(shown)})", "regular"),
        ("Pseudonym", str(inp.get("pseudonym") or ("none recorded" if inp.get("kind") == "dicom"
                                                   else "none (not a DICOM study)")), "mono"),
        ("Software", f"casefile {sw.get('casefile', '—')}", "regular"),
    ]
    if amendments:
        seqs = ", ".join(str(a.get("seq", "?")) for a in amendments)
        ident.append(("Amendments", f"{len(amendments)} recorded after this case (seq {seqs}); see the end "
                                    "of this sheet", "bold"))
    if case.get("intended_use"):
        ident.append(("Intended use", str(case["intended_use"]), "regular"))
    h1, d1 = _kv_block(fonts, "Identity", ident, left_w - 12, frozenset({"Intended use"}))
    top = [t for t in res.get("top") or [] if isinstance(t, dict)][:5]
    n_classes = _class_count(case)
    shown_of = (f"top {len(top)} of {n_classes} classes" if n_classes and len(top) < n_classes
                else f"all {len(top)} classes" if top else "no class scores recorded")
    flag = words.flags(case)
    col_w = width - left_w - 6
    flag_font = fonts.bold if flag and flag[1] else fonts.regular
    flag_lines = wrap(clean(flag[0], flag_font), flag_font, 8, col_w) if flag else []
    h2 = 72 + TOP_ROW * len(top) + 10 * len(flag_lines)

    def draw_result(c: Canvas, x: float, y: float) -> None:
        w = width - left_w
        text_line(c, x, y - 9, "RESULT", fonts.bold, 7.5, GREY)
        text_line(c, x, y - 34, str(res.get("label", "—")), fonts.bold, 20)
        conf = res.get("confidence")
        text_line(c, x, y - 47, f"model confidence {conf:.1%}" if isinstance(conf, int | float)
                  else "model confidence —", fonts.regular, 8, GREY)
        text_line(c, x, y - 59, shown_of, fonts.regular, 6.8, GREY)
        yy = y - 71
        label_w = 84.0
        bar_x, bar_w = x + label_w + 4, w - label_w - 4 - 40
        for item in top:
            p = item.get("p")
            p = float(p) if isinstance(p, int | float) and not isinstance(p, bool) else 0.0
            label = wrap(clean(str(item.get("label", "?")), fonts.regular), fonts.regular, 7.5, label_w)[0]
            text_line(c, x, yy, label, fonts.regular, 7.5)
            c.setFillColorRGB(*BAND)
            c.rect(bar_x, yy - 0.5, bar_w, 6, stroke=0, fill=1)
            c.setFillColorRGB(*GREY)
            c.rect(bar_x, yy - 0.5, bar_w * min(max(p, 0.0), 1.0), 6, stroke=0, fill=1)
            text_line(c, bar_x + bar_w + 4, yy, f"{p:.3f}", fonts.mono, 7.5)
            yy -= TOP_ROW
        yy -= 2
        for line in flag_lines:
            text_line(c, x, yy, line, flag_font, 8, INK)
            yy -= 10

    def draw(c: Canvas, x: float, y: float) -> None:
        d1(c, x, y)
        c.setStrokeColorRGB(*RULE)
        c.setLineWidth(0.5)
        c.line(x + left_w - 6, y - 4, x + left_w - 6, y - max(h1, h2) + 4)
        draw_result(c, x + left_w + 6, y)

    return Block(max(h1, h2) + 4, draw)


def _class_count(case: dict) -> int | None:
    """How many classes the model has: its labels, else the recorded scores."""
    labels = (case.get("model") or {}).get("labels")
    if isinstance(labels, list) and labels:
        return len(labels)
    scores = (case.get("result") or {}).get("scores")
    return len(scores) if isinstance(scores, dict) and scores else None


def title_block(case: dict, fonts: FontSet, width: float) -> Block:
    status = str(case.get("status") or worst(str(ch.get("outcome")) for ch in case.get("checks") or []))

    def draw(c: Canvas, x: float, y: float) -> None:
        text_line(c, x, y - 16, "Case sheet", fonts.bold, 17)
        text_line(c, x, y - 29, "What the model saw and said, and how far its explanation can be trusted",
                  fonts.regular, 8, GREY)
        cid = clean(str(case.get("case_id", "—")), fonts.mono)
        c.setFont(fonts.mono, 11)
        c.setFillColorRGB(*INK)
        c.drawRightString(x + width, y - 14, cid)
        word = f"checks overall: {OUTCOME_WORDS.get(status, status)}"
        ww = c.stringWidth(word, fonts.bold, 8)
        text_line(c, x + width - ww, y - 28, word, fonts.bold, 8)
        outcome_mark(c, x + width - ww - 8, y - 25.2, status, font=fonts.bold)
        c.setStrokeColorRGB(*INK)
        c.setLineWidth(1.5)
        c.line(x, y - 37, x + width, y - 37)

    return Block(42, draw)
