"""The PDF case sheet: identity, result, pictures, checks, reviews and cautions for one recorded case."""

from __future__ import annotations

import io
import threading
from collections.abc import Callable, Sequence
from datetime import UTC, datetime
from typing import Any

from reportlab import rl_config
from reportlab.lib.pagesizes import A4, LETTER
from reportlab.pdfbase.pdfmetrics import stringWidth
from reportlab.pdfgen.canvas import Canvas

from .. import __version__
from ..errors import InputError
from . import words
from .caution import caution_block, place_caution
from .draw import (
    GREY,
    OUTCOME_WORDS,
    RULE,
    Block,
    Column,
    Table,
    outcome_mark,
    paginate,
    text_line,
    wrap,
)
from .fonts import FontSet, clean, font_set
from .pictures import picture_blocks
from .top import identity_result, title_block

PAGE_SIZES = {"A4": A4, "letter": LETTER}
MARGIN = 36.0
FOOTER_H = 22.0
_RENDER_LOCK = threading.Lock()  # guards the reportlab setting changed while a sheet is drawn
NOTE_LIMIT = 1500  # characters of a review note printed on the sheet; the ledger keeps the whole note
GAP = 6.0  # points between the checks, reviews and amendments sections


def _fmt_short(t: Any) -> str:
    """'YYYY-MM-DD HH:MM' for table cells (the column header says UTC)."""
    s = str(t or "—")
    return f"{s[:10]} {s[11:16]}" if len(s) >= 16 and s[10] == "T" else s


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


def _heading(fonts: FontSet, title: str, note: str = "", width: float | None = None) -> Block:
    """A section title with a grey note after it; notes that do not fit beside it wrap under it."""
    start = stringWidth(title, fonts.bold, 10.5) + 8
    room = (width - start) if width is not None else None
    lines = [note] if note else []
    under = False
    if note and room is not None and stringWidth(note, fonts.regular, 7.5) > room:
        lines, under = wrap(clean(note, fonts.regular), fonts.regular, 7.5, width), True

    def draw(c: Canvas, x: float, y: float) -> None:
        text_line(c, x, y - 11, title, fonts.bold, 10.5)
        for i, line in enumerate(lines):
            if under:
                text_line(c, x, y - 20 - 8.6 * i, line, fonts.regular, 7.5, GREY)
            else:
                text_line(c, x + start, y - 11, line, fonts.regular, 7.5, GREY)

    return Block(16 + (8.6 * len(lines) + 1 if under else 0), draw, keep_with_next=True)


def _outcome_cell(fonts: FontSet) -> Callable[[Canvas, float, float, float, str], None]:
    def draw(c: Canvas, x: float, y: float, w: float, outcome: str) -> None:
        outcome_mark(c, x + 9, y - 4.2, outcome, font=fonts.bold)
        text_line(c, x + 18, y - 7, OUTCOME_WORDS.get(outcome, str(outcome)), fonts.bold, 7.5)

    return draw


def _role_cell(fonts: FontSet) -> Callable[[Canvas, float, float, float, str], None]:
    def draw(c: Canvas, x: float, y: float, w: float, role: str) -> None:
        text_line(c, x + 2.6, y - 6.6, role, fonts.bold if role == "flag" else fonts.regular, 7.5)

    return draw


def _check_blocks(case: dict, fonts: FontSet, width: float) -> tuple[list[Block], Table]:
    """Heading, header and one row per check; with flag data recorded, a ROLE column says for each
    check whether its outcome sends the case to a person (flag) or informs (note)."""
    checks = [ch for ch in case.get("checks") or [] if isinstance(ch, dict)]
    roles = any("flags" in ch for ch in checks)
    cols = [Column("OUTCOME", 54, "bold"), Column("CHECK", 90, "regular"), Column("VALUE", 42, "mono", "right"),
            Column("THRESHOLD", 52, "mono", "right"), Column("", 6)]
    if roles:
        cols.insert(2, Column("ROLE", 30, "regular"))
    cols.append(Column("WHAT IT MEANS", width - sum(c.width for c in cols), "regular"))
    table = Table(cols, fonts)
    table.special[0] = _outcome_cell(fonts)
    if roles:
        table.special[2] = _role_cell(fonts)
    note = "each outcome shown by word and shape: ● pass  △ warn  ⊠ fail  – not run"
    if roles:
        note += ";  role: a flag sends the case to a person, a note informs"
    blocks = [_heading(fonts, "Checks of the explanation", note, width), table.header()]

    def row(outcome: str, name: str, role: str, v: str, t: str, meaning: str) -> Block:
        return table.row([outcome, name, *([role] if roles else []), v, t, "", meaning])

    if not checks:
        blocks.append(row("not-run", "none recorded", "—", "—", "—", "no checks were recorded for this case"))
    for ch in checks:
        v = ch.get("value")
        blocks.append(row(str(ch.get("outcome", "?")), str(ch.get("name", "?")), words.check_role(ch),
                          words.value(v) if v is not None else words.MISSING, words.threshold(ch.get("threshold")),
                          str(ch.get("meaning") or "")))
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
            text += " — changes: " + ", ".join(f"{k} → {words.value(v)}" for k, v in changes.items())
        blocks.append(table.row([str(a.get("seq", "")), _fmt_short(a.get("amended_at")), str(a.get("author", "—")),
                                 text[:NOTE_LIMIT]]))
    return blocks, table


def _threads(software: dict) -> str:
    n = str(software.get("torch_threads", "?"))
    return f"{n} thread" if n == "1" else f"{n} threads"


def _replay_blocks(replay: dict | None, fonts: FontSet, width: float) -> list[Block]:
    """The latest replay of the case (casefile replay): when, whether it reproduced, what differed."""
    if not replay:
        return []
    ok = bool(replay.get("reproduces"))
    tol = replay.get("tolerances") or {}
    note = (f"computed again from the same input and model with the recorded settings; reproduces = same label, "
            f"confidence within {tol.get('confidence_abs', '?')}, maps with Spearman rho at least "
            f"{tol.get('map_spearman_min', '?')}, same check outcomes")
    sw, was = replay.get("software") or {}, replay.get("recorded_software") or {}
    said = (f"seq {replay.get('seq', '?')}, {_fmt_short(replay.get('replayed_at'))} UTC: "
            + ("reproduces" if ok else "does not reproduce")
            + f" (torch {sw.get('torch', '?')}, {_threads(sw)}; recorded with torch {was.get('torch', '?')}, "
              f"{_threads(was)})")
    lines = [said, *(f"– {d}" for d in (replay.get("differences") or [])[:8])]
    blocks = [_heading(fonts, "Latest replay", note, width)]
    for i, line in enumerate(lines):
        text = wrap(clean(line, fonts.regular), fonts.bold if i == 0 else fonts.regular, 7.5, width)

        def draw(c: Canvas, x: float, y: float, text: list[str] = text, bold: bool = i == 0) -> None:
            for k, part in enumerate(text):
                text_line(c, x, y - 9 - 8.8 * k, part, fonts.bold if bold else fonts.regular, 7.5)

        blocks.append(Block(3 + 8.8 * len(text), draw))
    return blocks


def _draw_frame(c: Canvas, fonts: FontSet, case: dict, entry_hash: str, page: int, pages: int,
                size: tuple[float, float]) -> None:
    """Footer and (after page 1) the running head: on every page (the caution box is in the flow)."""
    w, h = size
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


def render_sheet(
    case: dict,
    *,
    blob: Callable[[str], bytes],
    reviews: Sequence[dict] = (),
    amendments: Sequence[dict] = (),
    as_of_seq: int,
    entry_hash: str,
    replay: dict | None = None,
    page_size: str = "A4",
    fixed_time: datetime | str | None = None,
) -> bytes:
    """The case sheet as PDF bytes. Same inputs (and same ``fixed_time``) give the same bytes.

    The only declared time stamps are the PDF CreationDate and ModDate: ``fixed_time`` when given,
    else the case's ``recorded_at``. ``blob(digest)`` returns blob bytes (``Ledger.blob``).
    ``reviews`` and ``amendments`` are entry bodies; a ``seq`` key in each, when present, is printed.
    ``replay`` is the body of the case's latest ``replay`` entry (with its ``seq``), or None.
    """
    if page_size not in PAGE_SIZES:
        raise InputError(f"sheet: page size {page_size!r} is not one of {', '.join(PAGE_SIZES)}")
    if not isinstance(case, dict) or "case_id" not in case:
        raise InputError("sheet: the case body has no case_id")
    fonts = font_set()
    size = PAGE_SIZES[page_size]
    w, h = size
    inner = w - 2 * MARGIN
    caution = caution_block(fonts, inner)
    bottom = MARGIN + FOOTER_H + caution.height + 2  # every page keeps room for the caution box
    check_blocks, check_table = _check_blocks(case, fonts, inner)
    review_blocks, review_table = _review_blocks(list(reviews), as_of_seq, fonts, inner)
    amend_blocks, amend_table = _amendment_blocks(list(amendments), fonts, inner)
    head = [title_block(case, fonts, inner), identity_result(case, fonts, inner, amendments),
            *picture_blocks(case, blob, fonts, inner)]
    gap = Block(GAP, lambda c, x, y: None)
    replay_blocks = _replay_blocks(replay, fonts, inner)
    blocks = [*head, *check_blocks, gap, *review_blocks, *([gap, *amend_blocks] if amend_blocks else []),
              *([gap, *replay_blocks] if replay_blocks else [])]
    check_rows = range(len(head) + 2, len(head) + len(check_blocks))
    first_review = len(head) + len(check_blocks) + 1
    review_rows = range(first_review + 2, first_review + len(review_blocks)) if reviews else range(0)
    amend_end = len(blocks) - (len(replay_blocks) + 1 if replay_blocks else 0)
    amend_rows = range(amend_end - len(amend_blocks) + 2, amend_end) if amend_blocks else range(0)

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
    pages = place_caution(paginate(blocks, top - bottom, top - 16 - bottom, repeat), caution, check_blocks[-1])
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
