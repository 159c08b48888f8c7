"""The PDF case sheet: identity, result, pictures, checks, reviews and cautions for one recorded case."""

from __future__ import annotations

import io
import threading
from collections.abc import Callable, Sequence
from datetime import UTC, datetime
from typing import Any

from reportlab import rl_config
from reportlab.lib.pagesizes import A4, LETTER
from reportlab.pdfgen.canvas import Canvas

from casefile.cautions import CAUTION_TITLE, CAUTIONS

from .. import __version__
from ..errors import InputError
from .draw import (
    BAND,
    GREY,
    INK,
    OUTCOME_RANK,
    OUTCOME_WORDS,
    RULE,
    Block,
    Column,
    Table,
    outcome_mark,
    paginate,
    text_line,
    wrap,
    wrap_capped,
)
from .fonts import FontSet, clean, font_set
from .pictures import picture_blocks

PAGE_SIZES = {"A4": A4, "letter": LETTER}
MARGIN = 36.0
FOOTER_H = 22.0
_RENDER_LOCK = threading.Lock()  # guards the reportlab setting changed while a sheet is drawn
NOTE_LIMIT = 1500  # characters of a review note printed on the sheet; the ledger keeps the whole note
USE_LINES = 3  # lines of the intended-use text printed on the sheet; the ledger keeps the whole text
USE_TAIL = "(full text in the ledger record)"
TOP_ROW = 12.0  # points between the rows of top classes in the result box
CAUTION_LEADING = 8.8
GAP = 6.0  # points between the checks, reviews and amendments sections


def _fmt_num(v: Any) -> str:
    if v is None:
        return "—"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, int | float):
        return f"{v:.3g}" if abs(v) < 1000 else f"{v:.0f}"
    if isinstance(v, dict):
        return ", ".join(f"{k} {_fmt_num(x)}" for k, x in v.items())
    return str(v)


def _fmt_time(t: Any) -> str:
    s = str(t or "—")
    return s.replace("T", " ").replace("Z", " UTC") if s.endswith("Z") else s


def _fmt_short(t: Any) -> str:
    """'YYYY-MM-DD HH:MM' for table cells (the column header says UTC)."""
    s = str(t or "—")
    return f"{s[:10]} {s[11:16]}" if len(s) >= 16 and s[10] == "T" else s


def _short(d: Any) -> str:
    return str(d)[:12] if d else "—"


def _pdf_date(fixed_time: datetime | str | None, recorded_at: str | None) -> str:
    """The PDF date string (D:YYYYMMDDHHmmSS+00'00') of the declared time stamp."""
    t = fixed_time if fixed_time is not None else recorded_at
    if isinstance(t, str):
        try:
            t = datetime.fromisoformat(t.replace("Z", "+00:00"))
        except ValueError as e:
            raise InputError(f"sheet: time stamp {t!r} is not an ISO 8601 time") from e
    if t is None:
        t = datetime(2000, 1, 1, tzinfo=UTC)
    if t.tzinfo is None:
        t = t.replace(tzinfo=UTC)
    t = t.astimezone(UTC)
    return t.strftime("D:%Y%m%d%H%M%S+00'00'")


def _kv_block(fonts: FontSet, title: str, rows: Sequence[tuple[str, str, str]], width: float,
              capped: frozenset[str] = frozenset()) -> tuple[float, Callable[[Canvas, float, float], None]]:
    """A titled list of label/value pairs; the third item names the value font. Values of the labels
    in ``capped`` are kept to ``USE_LINES`` lines, ending with a pointer to the ledger record."""
    label_w = 76.0
    size, leading = 7.5, 9.2

    def lines(k: str, v: str, f: str) -> list[str]:
        font = getattr(fonts, f)
        if k in capped:
            return wrap_capped(clean(v, font), font, size, width - label_w, USE_LINES, USE_TAIL)
        return wrap(clean(v, font), font, size, width - label_w)

    wrapped = [(k, lines(k, v, f), f) for k, v, f in rows]
    h = 14 + sum(len(ls) for _, ls, _ in wrapped) * leading

    def draw(c: Canvas, x: float, y: float) -> None:
        text_line(c, x, y - 9, title.upper(), fonts.bold, 7.5, GREY)
        yy = y - 14 - size
        for k, lines, f in wrapped:
            text_line(c, x, yy, k, fonts.regular, size, GREY)
            for line in lines:
                text_line(c, x + label_w, yy, line, getattr(fonts, f), size)
                yy -= leading

    return h, draw


def _identity_result(case: dict, fonts: FontSet, width: float, amendments: Sequence[dict] = ()) -> Block:
    inp, model, res = case.get("input") or {}, case.get("model") or {}, case.get("result") or {}
    sw = case.get("software") or {}
    left_w = width * 0.56
    ident = [
        ("Case", str(case.get("case_id", "—")), "mono"),
        ("Recorded", _fmt_time(case.get("recorded_at")), "regular"),
        ("Model", f"{model.get('name', '—')}  version {model.get('version', '—')}", "regular"),
        ("Model digest", _short(model.get("digest")), "mono"),
        ("Input digest", _short(inp.get("file_sha256")), "mono"),
        ("Input", f"{inp.get('file_name', '—')}  ({inp.get('modality', '—')}, "
                  f"{inp.get('width', '?')}×{inp.get('height', '?')} px)", "regular"),
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
    top = list(res.get("top") or [])[:5]
    h2 = 62 + TOP_ROW * len(top)

    def draw_result(c: Canvas, x: float, y: float) -> None:
        w = width - left_w
        text_line(c, x, y - 9, "RESULT", fonts.bold, 7.5, GREY)
        text_line(c, x, y - 34, str(res.get("label", "—")), fonts.bold, 20)
        conf = res.get("confidence")
        text_line(c, x, y - 47, f"model confidence {conf:.1%}" if isinstance(conf, int | float)
                  else "model confidence —", fonts.regular, 8, GREY)
        yy = y - 62
        label_w = 84.0
        bar_x, bar_w = x + label_w + 4, w - label_w - 4 - 40
        for item in top:
            p = float(item.get("p") or 0.0)
            label = wrap(clean(str(item.get("label", "?")), fonts.regular), fonts.regular, 7.5, label_w)[0]
            text_line(c, x, yy, label, fonts.regular, 7.5)
            c.setFillColorRGB(*BAND)
            c.rect(bar_x, yy - 0.5, bar_w, 6, stroke=0, fill=1)
            c.setFillColorRGB(*GREY)
            c.rect(bar_x, yy - 0.5, bar_w * min(max(p, 0.0), 1.0), 6, stroke=0, fill=1)
            text_line(c, bar_x + bar_w + 4, yy, f"{p:.3f}", fonts.mono, 7.5)
            yy -= TOP_ROW

    def draw(c: Canvas, x: float, y: float) -> None:
        d1(c, x, y)
        c.setStrokeColorRGB(*RULE)
        c.setLineWidth(0.5)
        c.line(x + left_w - 6, y - 4, x + left_w - 6, y - max(h1, h2) + 4)
        draw_result(c, x + left_w + 6, y)

    return Block(max(h1, h2) + 4, draw)


def _heading(fonts: FontSet, title: str, note: str = "") -> Block:
    def draw(c: Canvas, x: float, y: float) -> None:
        text_line(c, x, y - 11, title, fonts.bold, 10.5)
        if note:
            text_line(c, x + c.stringWidth(title, fonts.bold, 10.5) + 8, y - 11, note, fonts.regular, 7.5, GREY)

    return Block(16, draw, keep_with_next=True)


def _outcome_cell(fonts: FontSet) -> Callable[[Canvas, float, float, float, str], None]:
    def draw(c: Canvas, x: float, y: float, w: float, outcome: str) -> None:
        outcome_mark(c, x + 9, y - 4.2, outcome, font=fonts.bold)
        text_line(c, x + 18, y - 7, OUTCOME_WORDS.get(outcome, str(outcome)), fonts.bold, 7.5)

    return draw


def _check_blocks(case: dict, fonts: FontSet, width: float) -> tuple[list[Block], Table]:
    cols = [Column("OUTCOME", 54, "bold"), Column("CHECK", 90, "regular"), Column("VALUE", 42, "mono", "right"),
            Column("THRESHOLD", 52, "mono", "right"), Column("", 6)]
    cols.append(Column("WHAT IT MEANS", width - sum(c.width for c in cols), "regular"))
    table = Table(cols, fonts)
    table.special[0] = _outcome_cell(fonts)
    checks = list(case.get("checks") or [])
    blocks = [_heading(fonts, "Checks of the explanation",
                       "each outcome shown by word and shape: ● pass  △ warn  ⊠ fail  – not run"),
              table.header()]
    if not checks:
        blocks.append(table.row(["not-run", "none recorded", "—", "—", "", "no checks were recorded for this case"]))
    for ch in checks:
        blocks.append(table.row([str(ch.get("outcome", "?")), str(ch.get("name", "?")), _fmt_num(ch.get("value")),
                                 _fmt_num(ch.get("threshold")), "", str(ch.get("meaning", ""))]))
    return blocks, table


def _review_blocks(reviews: Sequence[dict], as_of_seq: int, fonts: FontSet, width: float) -> tuple[
        list[Block], Table]:
    cols = [Column("SEQ", 30, "mono", "right"), Column("RECORDED (UTC)", 82, "regular"), Column("READER", 62, "mono"),
            Column("VERDICT", 46, "bold"), Column("LABEL", 54, "regular")]
    cols.append(Column("NOTE", width - sum(c.width for c in cols), "regular"))
    table = Table(cols, fonts)
    blocks = [_heading(fonts, "Second reads recorded so far", f"as of ledger seq {as_of_seq}")]
    if not reviews:
        blocks.append(Block(16, lambda c, x, y: text_line(c, x, y - 10, "No second read recorded yet.",
                                                          fonts.regular, 8, GREY)))
        return blocks, table
    blocks.append(table.header())
    for r in reviews:
        note = str(r.get("note") or "")
        if len(note) > NOTE_LIMIT:
            note = note[:NOTE_LIMIT] + " … (shortened on the sheet; the ledger holds the full note)"
        if r.get("amends_seq"):
            note = f"(replaces this reader's read at seq {r['amends_seq']}) {note}"
        when = r.get("reviewed_at") or r.get("recorded_at") or r.get("time")
        blocks.append(table.row([str(r.get("seq", "")), _fmt_short(when), str(r.get("reader", "—")),
                                 str(r.get("verdict", "—")), str(r.get("label") or "—"), note]))
    return blocks, table


def _amendment_blocks(amendments: Sequence[dict], fonts: FontSet, width: float) -> tuple[list[Block], Table]:
    cols = [Column("SEQ", 30, "mono", "right"), Column("RECORDED (UTC)", 82, "regular"), Column("AUTHOR", 90, "mono")]
    cols.append(Column("REASON AND CHANGES", width - sum(c.width for c in cols), "regular"))
    table = Table(cols, fonts)
    if not amendments:
        return [], table
    blocks = [_heading(fonts, "Amendments recorded after this case",
                       "the record above is shown as first written; these corrections follow it"), table.header()]
    for a in amendments:
        changes = a.get("changes")
        text = str(a.get("reason", ""))
        if isinstance(changes, dict) and changes:
            text += " — changes: " + ", ".join(f"{k} → {v}" for k, v in changes.items())
        blocks.append(table.row([str(a.get("seq", "")), _fmt_short(a.get("amended_at")), str(a.get("author", "—")),
                                 text[:NOTE_LIMIT]]))
    return blocks, table


def _caution_height(fonts: FontSet, width: float) -> tuple[float, list[str]]:
    lines: list[str] = []
    for sentence in CAUTIONS:
        lines.extend(wrap(clean(sentence, fonts.regular), fonts.regular, 7.5, width - 20))
    return 20 + CAUTION_LEADING * len(lines), lines


def _draw_frame(c: Canvas, fonts: FontSet, case: dict, entry_hash: str, page: int, pages: int,
                size: tuple[float, float]) -> None:
    """Cautions, footer and (after page 1) the running head: on every page."""
    w, h = size
    inner = w - 2 * MARGIN
    ch, lines = _caution_height(fonts, inner)
    y0 = MARGIN + FOOTER_H
    c.setStrokeColorRGB(*INK)
    c.setLineWidth(1.2)
    c.setFillColorRGB(1, 1, 1)
    c.rect(MARGIN, y0, inner, ch, stroke=1, fill=1)
    c.setFillColorRGB(*INK)
    c.rect(MARGIN, y0 + ch - 3, inner, 3, stroke=0, fill=1)
    text_line(c, MARGIN + 10, y0 + ch - 14, CAUTION_TITLE, fonts.bold, 8.5)
    yy = y0 + ch - 24
    for line in lines:
        text_line(c, MARGIN + 10, yy, line, fonts.regular, 7.5)
        yy -= CAUTION_LEADING
    c.setStrokeColorRGB(*RULE)
    c.setLineWidth(0.5)
    c.line(MARGIN, MARGIN + FOOTER_H - 6, w - MARGIN, MARGIN + FOOTER_H - 6)
    label = "Verification code (ledger entry hash): "
    text_line(c, MARGIN, MARGIN + 4, label, fonts.regular, 6.5, GREY)
    text_line(c, MARGIN + c.stringWidth(label, fonts.regular, 6.5), MARGIN + 4, entry_hash, fonts.mono, 6.5)
    c.setFont(fonts.regular, 7)
    c.setFillColorRGB(*GREY)
    c.drawRightString(w - MARGIN, MARGIN + 4, f"page {page} of {pages}")
    if page > 1:
        text_line(c, MARGIN, h - MARGIN - 8, f"Case sheet {case.get('case_id', '')} (continued)", fonts.bold, 9,
                  GREY)


def _title_block(case: dict, fonts: FontSet, width: float) -> Block:
    status = str(case.get("status") or _worst(case))

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


def _worst(case: dict) -> str:
    outs = [str(ch.get("outcome")) for ch in case.get("checks") or []]
    return max(outs, key=lambda o: OUTCOME_RANK.get(o, 3)) if outs else "not-run"


def render_sheet(
    case: dict,
    *,
    blob: Callable[[str], bytes],
    reviews: Sequence[dict] = (),
    amendments: Sequence[dict] = (),
    as_of_seq: int,
    entry_hash: str,
    page_size: str = "A4",
    fixed_time: datetime | str | None = None,
) -> bytes:
    """The case sheet as PDF bytes. Same inputs (and same ``fixed_time``) give the same bytes.

    The only declared time stamps are the PDF CreationDate and ModDate: ``fixed_time`` when given,
    else the case's ``recorded_at``. ``blob(digest)`` returns blob bytes (``Ledger.blob``).
    ``reviews`` and ``amendments`` are entry bodies; a ``seq`` key in each, when present, is printed.
    """
    if page_size not in PAGE_SIZES:
        raise InputError(f"sheet: page size {page_size!r} is not one of {', '.join(PAGE_SIZES)}")
    if not isinstance(case, dict) or "case_id" not in case:
        raise InputError("sheet: the case body has no case_id")
    fonts = font_set()
    size = PAGE_SIZES[page_size]
    w, h = size
    inner = w - 2 * MARGIN
    caution_h, _ = _caution_height(fonts, inner)
    bottom = MARGIN + FOOTER_H + caution_h + 8
    check_blocks, check_table = _check_blocks(case, fonts, inner)
    review_blocks, review_table = _review_blocks(list(reviews), as_of_seq, fonts, inner)
    amend_blocks, amend_table = _amendment_blocks(list(amendments), fonts, inner)
    head = [_title_block(case, fonts, inner), _identity_result(case, fonts, inner, amendments),
            *picture_blocks(case, blob, fonts, inner)]
    gap = Block(GAP, lambda c, x, y: None)
    blocks = [*head, *check_blocks, gap, *review_blocks, *([gap, *amend_blocks] if amend_blocks else [])]
    check_rows = range(len(head) + 2, len(head) + len(check_blocks))
    first_review = len(head) + len(check_blocks) + 1
    review_rows = range(first_review + 2, first_review + len(review_blocks)) if reviews else range(0)
    amend_rows = range(len(blocks) - len(amend_blocks) + 2, len(blocks)) if amend_blocks else range(0)

    def repeat(i: int) -> list[Block]:
        """A table continued on a new page starts with its header again."""
        if i in check_rows:
            return [check_table.header()]
        if i in review_rows:
            return [review_table.header()]
        if i in amend_rows:
            return [amend_table.header()]
        return []

    top = h - MARGIN
    pages = paginate(blocks, top - bottom, top - 16 - bottom, repeat)
    with _RENDER_LOCK:
        saved_a85 = rl_config.useA85
        rl_config.useA85 = 0  # binary streams: a third smaller and several times faster to write
        try:
            return _draw_pages(case, pages, fonts, size, entry_hash, fixed_time)
        finally:
            rl_config.useA85 = saved_a85


def _draw_pages(case: dict, pages: list[list[Block]], fonts: FontSet, size: tuple[float, float],
                entry_hash: str, fixed_time: datetime | str | None) -> bytes:
    top = size[1] - MARGIN
    buf = io.BytesIO()
    c = Canvas(buf, pagesize=size, invariant=1, pageCompression=1, initialFontName=fonts.regular)
    pdf_date = _pdf_date(fixed_time, case.get("recorded_at"))
    c.setDateFormatter(lambda *_: pdf_date)
    c.setTitle(f"Case sheet {case['case_id']}")
    model = case.get("model") or {}
    c.setSubject(f"Explanation record for one output of {model.get('name', 'a model')} "
                 f"version {model.get('version', '?')}")
    c.setCreator(f"casefile {__version__}")
    c.setAuthor("casefile")
    c.setKeywords(f"verification code {entry_hash}")
    for n, page in enumerate(pages, start=1):
        _draw_frame(c, fonts, case, entry_hash, n, len(pages), size)
        y = top - (16 if n > 1 else 0)
        for b in page:
            b.draw(c, MARGIN, y)
            y -= b.height
        c.showPage()
    c.save()
    return buf.getvalue()
