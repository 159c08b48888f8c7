"""The period report as a PDF in the case sheet's style: its fonts, ink, tables, page flow and caution box.

Sections in order: key figures; cases per day (or week) per model version; status rates over time;
check outcomes; confidence against the previous period with the drift signal; second-read disagreement
per draw; the confusion table; the reliability diagram; failed attempts by reason; the verification
block. A section without data says why in a sentence instead of showing an empty chart.
"""

from __future__ import annotations

import io
from collections.abc import Callable, Mapping, Sequence
from datetime import UTC, datetime
from typing import Any

from reportlab import rl_config
from reportlab.graphics import renderPDF
from reportlab.graphics.shapes import Drawing
from reportlab.lib.pagesizes import A4
from reportlab.pdfgen.canvas import Canvas

from casefile import __version__
from casefile.cautions import REPORT_CAUTION_TITLE, REPORT_CAUTIONS
from casefile.report import charts
from casefile.report.figures import nonempty
from casefile.sheet.caution import caution_block, place_caution
from casefile.sheet.draw import GREY, INK, RULE, Block, Column, Table, paginate, text_line, wrap
from casefile.sheet.fonts import FontSet, clean, font_set

MARGIN = 36.0
FOOTER_H = 22.0
CHART_H = 150.0
GAP = 8.0
MAX_VERSIONS = 4  # model versions drawn apart in the volume chart; the rest are summed as "other versions"


def pct(v: float | None, digits: int = 1) -> str:
    return "—" if v is None else f"{v * 100:.{digits}f} %"


def p_value(p: float) -> str:
    """'p < 0.0001' or 'p = 0.0123': the p-value with as many digits as it can honestly carry."""
    return "p < 0.0001" if p < 1e-4 else f"p = {p:.4f}" if p < 0.01 else f"p = {p:.3f}"


def _heading(fonts: FontSet, title: str, note: str, width: float, *, rule: bool = True) -> Block:
    lines = wrap(clean(note, fonts.regular), fonts.regular, 7.5, width) if note else []

    def draw(c: Canvas, x: float, y: float) -> None:
        if rule:
            c.setStrokeColorRGB(*RULE)
            c.setLineWidth(0.5)
            c.line(x, y - 2, x + width, y - 2)
        text_line(c, x, y - 15, title, fonts.bold, 10.5)
        for i, line in enumerate(lines):
            text_line(c, x, y - 25 - 8.6 * i, line, fonts.regular, 7.5, GREY)

    return Block(20 + 8.6 * len(lines), draw, keep_with_next=True)


def _opening(fig: Mapping[str, Any], fonts: FontSet, width: float, key: str, title: str, note: str
             ) -> tuple[list[Block], bool]:
    """A section's heading, followed by its sentence when the figures say why it has nothing to show;
    the flag says whether that sentence is all the section holds."""
    blocks = [_heading(fonts, title, note, width)]
    said = fig["sentences"].get(key)
    return ([*blocks, _para(fonts, said, width)], True) if said else (blocks, False)


Text = str | Callable[[Mapping[str, Any]], str]
Section = Callable[[Mapping[str, Any], FontSet, float], list[Block]]


def _guarded(key: str, title: Text, note: Text) -> Callable[[Section], Section]:
    """A section that opens with its heading and, when the figures say why it has nothing to show, ends
    with that sentence instead of its body."""

    def wrap(body: Section) -> Section:
        def section(fig: Mapping[str, Any], fonts: FontSet, width: float) -> list[Block]:
            head = [title(fig) if callable(title) else title, note(fig) if callable(note) else note]
            blocks, said = _opening(fig, fonts, width, key, *head)
            return blocks if said else [*blocks, *body(fig, fonts, width)]

        return section

    return wrap


def _unit(fig: Mapping[str, Any]) -> str:
    return str(fig["period"]["bucket"])


def _para(fonts: FontSet, text: str, width: float, *, bold: bool = False, size: float = 8.0) -> Block:
    font = fonts.bold if bold else fonts.regular
    lines = wrap(clean(text, font), font, size, width)
    leading = size * 1.25

    def draw(c: Canvas, x: float, y: float) -> None:
        for i, line in enumerate(lines):
            text_line(c, x, y - size - 2 - leading * i, line, font, size, INK)

    return Block(4 + leading * len(lines), draw)


def _chart(d: Drawing) -> Block:
    def draw(c: Canvas, x: float, y: float) -> None:
        renderPDF.draw(d, c, x, y - d.height - 2)

    return Block(d.height + 6, draw)


def _table(fonts: FontSet, cols: Sequence[Column], rows: Sequence[Sequence[str]],
           special: Mapping[int, Callable[[Canvas, float, float, float, str], None]] | None = None
           ) -> tuple[Table, list[Block]]:
    table = Table(cols, fonts, align_headers=True)
    table.special.update(special or {})
    return table, [table.header(), *(table.row(r) for r in rows)]


def _title(fig: Mapping[str, Any], fonts: FontSet, width: float) -> Block:
    p = fig["period"]
    what = f"model {fig['model']}" if fig["model"] else "all models"

    def draw(c: Canvas, x: float, y: float) -> None:
        text_line(c, x, y - 16, "Period report", fonts.bold, 17)
        text_line(c, x, y - 29, "How the model and its explanation checks behaved, and what second readers found",
                  fonts.regular, 8, GREY)
        span = f"{p['since'][:10]} to {p['until'][:10]} (UTC)"
        c.setFont(fonts.bold, 11)
        c.setFillColorRGB(*INK)
        c.drawRightString(x + width, y - 14, span)
        c.setFont(fonts.regular, 8)
        c.drawRightString(x + width, y - 28, f"{what}; {p['days']} days, by {p['bucket']}")
        c.setStrokeColorRGB(*INK)
        c.setLineWidth(1.5)
        c.line(x, y - 37, x + width, y - 37)

    return Block(44, draw)


def _key_figures(fig: Mapping[str, Any], fonts: FontSet, width: float) -> list[Block]:
    cases, status, conf, reads, fails = (fig["cases"], fig["status"], fig["confidence"], fig["reads"],
                                         fig["failures"])
    ks = conf["ks"]
    rel = reads["reliability"]
    ov = reads["overall"]
    rows = [
        ("cases this period", f"{cases['total']:,}  (previous period of the same length: {cases['previous_total']:,})"),
        ("model versions", ", ".join(f"{m['model']} ({m['cases']:,})" for m in cases["models"]) or "none"),
        ("sent to a person by a flag", f"{status['flagged']:,} of {cases['total']:,} ({pct(status['flagged_share'])})"),
        ("confidence drift (KS)", f"D = {ks['statistic']:.3f}, {p_value(ks['pvalue'])}" if ks else "not computed"),
        ("reader disagreement", f"{ov['disagreements']} of {ov['reviewed']} reviewed cases ({pct(ov['rate'])}; "
                                f"95 % Wilson {pct(ov['wilson_95'][0])} to {pct(ov['wilson_95'][1])})"
         if ov["reviewed"] else "no reviewed case"),
        ("calibration (ECE)", f"{rel['ece']:.3f} over {rel['n']} readings" if rel["ece"] is not None else "not computed"),
        ("failed attempts", f"{fails['total']:,} (every model)"),
    ]
    cols = [Column("FIGURE", 150, "bold"), Column("VALUE", width - 150, "regular")]
    _, blocks = _table(fonts, cols, rows)
    return [_heading(fonts, "Key figures", "each figure names what it counts; details and charts follow", width,
                     rule=False),
            *blocks]


@_guarded("cases", lambda f: f"Cases per {_unit(f)} and model version",
          lambda f: f"cases recorded in each {_unit(f)} (UTC), stacked by model name@version" + (
              "; weeks run Monday to Sunday, and a week cut by the period's start or end holds fewer days"
              if _unit(f) == "week" else ""))
def _volume(fig: Mapping[str, Any], fonts: FontSet, width: float) -> list[Block]:
    unit = _unit(fig)
    by_model = dict(fig["cases"]["by_model"])
    if len(by_model) > MAX_VERSIONS:
        names = sorted(by_model, key=lambda m: -sum(by_model[m]))
        keep, rest = names[:MAX_VERSIONS - 1], names[MAX_VERSIONS - 1:]
        other = [sum(by_model[m][i] for m in rest) for i in range(len(fig["buckets"]))]
        by_model = {**{m: by_model[m] for m in keep}, f"{len(rest)} other versions": other}
    d = charts.stacked_bars(_bucket_labels(fig), by_model, fonts, width=width, height=CHART_H,
                            x_label=_x_title(fig), y_label=f"cases per {unit}")
    return [_chart(d)]


def _bucket_labels(fig: Mapping[str, Any]) -> list[str]:
    return [b[5:] for b in fig["buckets"]]  # MM-DD; the axis title gives the year


def _x_title(fig: Mapping[str, Any]) -> str:
    years = sorted({b[:4] for b in fig["buckets"]})
    span = years[0] if len(years) == 1 else f"{years[0]}–{years[-1]}"
    return (f"day recorded (UTC), month-day, {span}" if fig["period"]["bucket"] == "day"
            else f"week recorded (UTC), its Monday as month-day, {span}")


@_guarded("status", lambda f: f"Status and flags per {_unit(f)}",
          "status is the worst check outcome of a case; a flag sends the case to a person")
def _status(fig: Mapping[str, Any], fonts: FontSet, width: float) -> list[Block]:
    unit = _unit(fig)
    st = fig["status"]
    series = {"warn": st["by_bucket"].get("warn", []), "fail": st["by_bucket"].get("fail", []),
              "flagged": st["flagged_by_bucket"]}
    over_time: list[Block] = [_para(fonts, fig["sentences"]["thin"], width)] if "thin" in fig["sentences"] else [
        _chart(charts.share_lines(_bucket_labels(fig), series, fonts, width=width, height=CHART_H,
                                  x_label=_x_title(fig), y_label=f"share of the {unit}'s cases (%)"))]
    total = fig["cases"]["total"]
    rows = [[s, f"{st['counts'].get(s, 0):,}", pct(st["shares"].get(s))] for s in ("pass", "warn", "fail", "not-run")]
    rows.append(["flagged", f"{st['flagged']:,}", pct(st["flagged_share"])])
    _, table = _table(fonts, [Column("STATUS", 90, "bold"), Column(f"CASES (OF {total:,})", 90, "mono", "right"),
                              Column("SHARE", 70, "mono", "right")], rows)
    return [*over_time, *table]


@_guarded("checks", "Check outcomes",
          lambda f: f"per check, the share of cases where it warned or failed, per {_unit(f)}; the table gives "
                    "every outcome over the whole period")
def _checks(fig: Mapping[str, Any], fonts: FontSet, width: float) -> list[Block]:
    unit = _unit(fig)
    ch = fig["checks"]
    series = {n: ch["not_passed_by_bucket"][n] for n in ch["names"]}
    out: list[Block] = []
    if "thin" in fig["sentences"]:
        out.append(_para(fonts, fig["sentences"]["thin"], width))
    elif any(nonempty(v) for v in series.values()):
        out.append(_chart(charts.share_lines(_bucket_labels(fig), series, fonts, width=width, height=CHART_H + 10,
                                             x_label=_x_title(fig),
                                             y_label=f"warned or failed, share of the {unit}'s cases (%)")))
    cols = [Column("CHECK", 110, "regular"), Column("CASES", 60, "mono", "right")]
    cols += [Column(o.upper().replace("-", " "), (width - 170) / 4, "mono", "right") for o in ("pass", "warn", "fail",
                                                                                              "not-run")]
    rows = []
    for n in ch["names"]:
        tot = ch["totals"][n]
        rows.append([n, f"{tot['cases']:,}", *(f"{tot.get(o, {}).get('n', 0):,}  {pct(tot.get(o, {}).get('share'))}"
                                             for o in ("pass", "warn", "fail", "not-run"))])
    _, table = _table(fonts, cols, rows)
    return [*out, *table]


def _confidence(fig: Mapping[str, Any], fonts: FontSet, width: float) -> list[Block]:
    conf = fig["confidence"]
    prev = fig["period"]["previous"]
    blocks = [_heading(fonts, "Confidence against the previous period",
                       f"the model's confidence in its output label; previous period {prev['since'][:10]} to "
                       f"{prev['until'][:10]}, of the same length", width)]
    a, b = conf["this"], conf["previous"]
    curves = {f"this period (n = {a['n']:,})": conf["curve"]["this"],
              f"previous period (n = {b['n']:,})": conf["curve"]["previous"]}
    ks = conf["ks"]
    gap = None
    if ks is not None and conf["curve"]["this"] and conf["curve"]["previous"]:
        diffs = [abs(x - y) for x, y in zip(conf["curve"]["this"], conf["curve"]["previous"], strict=True)]
        j = max(range(len(diffs)), key=diffs.__getitem__)
        lo, hi = sorted((conf["curve"]["this"][j], conf["curve"]["previous"][j]))
        gap = (conf["curve"]["grid"][j], lo, hi) if hi > lo else None
    out = list(blocks)
    if a["n"] or b["n"]:
        out.append(_chart(charts.cumulative(conf["curve"]["grid"], curves, fonts, width=width, height=CHART_H + 10,
                                            x_label="model confidence in its output label (probability, 0 to 1)",
                                            y_label="cases at or below this confidence (%)", gap=gap)))
    if ks is not None:
        verdict = ("the two distributions differ more than chance alone would often give (p < 0.01)"
                   if ks["pvalue"] < 0.01 else "no strong sign that the distributions differ")
        out.append(_para(fonts, f"Two-sample Kolmogorov–Smirnov: D = {ks['statistic']:.3f} (the largest gap between "
                                f"the two curves), {p_value(ks['pvalue'])}; {verdict}. Medians "
                                f"{a['median']:.3f} this period, {b['median']:.3f} previous.", width))
    if "confidence" in fig["sentences"]:
        out.append(_para(fonts, fig["sentences"]["confidence"], width))
    return out


@_guarded("reads", "Second reads: disagreement per draw",
          "readings of this period's cases recorded up to the ledger head; a case counts as a disagreement "
          "when any reader disagreed; 95 % Wilson score intervals")
def _reads(fig: Mapping[str, Any], fonts: FontSet, width: float) -> list[Block]:
    reads = fig["reads"]
    ov = reads["overall"]
    out: list[Block] = []
    rows = [(f"{d['draw_id']} ({d['plan']}, n = {d['reviewed']})", d["rate"], *d["wilson_95"])
            for d in reads["draws"] if d["reviewed"]]
    if ov["reviewed"]:
        rows.append((f"all reviewed cases (n = {ov['reviewed']})", ov["rate"], *ov["wilson_95"]))
    if rows:
        out.append(_chart(charts.intervals(rows, fonts, width=width,
                                           x_label="disagreement rate (% of reviewed cases), dot: rate, bar: 95 % "
                                                   "Wilson interval")))
    cols = [Column("DRAW", 110, "mono"), Column("PLAN", 60), Column("REVIEWED", 60, "mono", "right"),
            Column("DISAGREED", 60, "mono", "right"), Column("RATE", 60, "mono", "right"),
            Column("95 % WILSON", width - 350, "mono", "right")]
    trows = [[d["draw_id"], d["plan"] or "?", str(d["reviewed"]), str(d["disagreements"]), pct(d["rate"]),
              f"{pct(d['wilson_95'][0])} to {pct(d['wilson_95'][1])}" if d["wilson_95"] else "—"]
             for d in reads["draws"]]
    if trows:
        out.extend(_table(fonts, cols, trows)[1])
    if "draws" in fig["sentences"]:
        out.append(_para(fonts, fig["sentences"]["draws"], width))
    if any(d["weighted_plan"] for d in reads["draws"]):
        out.append(_para(fonts, "Risk and stratified draws over-sample some cases on purpose: their rate here is the "
                                "rate among the reviewed members, not an estimate for all cases (`casefile stats` "
                                "gives the weighted estimate).", width, size=7.5))
    return out


def _confusion(fig: Mapping[str, Any], fonts: FontSet, width: float) -> list[Block]:
    conf = fig["reads"]["confusion"]
    blocks = [_heading(fonts, "Model label against reader label",
                       f"counts of readings (n = {conf['readings']}); rows: the model's label, columns: the reader's; "
                       "the diagonal is agreement", width)]
    if "reads" in fig["sentences"] or "confusion" in fig["sentences"]:
        text = fig["sentences"].get("confusion") or "No readings, so no table."
        return [*blocks, _para(fonts, text, width)]
    labels = conf["labels"]
    first = 130.0
    w = min(80.0, (width - first - 60) / max(len(labels), 1))
    cols = [Column("MODEL \\ READER", first, "bold"), *(Column(lab.upper(), w, "mono", "right") for lab in labels),
            Column("TOTAL", 60, "mono", "right")]
    rows = []
    for m in labels:
        row = conf["rows"][m]
        rows.append([m, *(f"[{row[r]}]" if r == m else str(row[r]) for r in labels), str(sum(row.values()))])
    out = [*blocks, *_table(fonts, cols, rows)[1]]
    out.append(_para(fonts, "Diagonal counts are in [brackets].", width, size=7.0))
    return out


def _reliability(fig: Mapping[str, Any], fonts: FontSet, width: float) -> list[Block]:
    rel = fig["reads"]["reliability"]
    blocks = [_heading(fonts, "Reliability of confidence against readers",
                       "equal-width confidence bins; a bar is the share of agree/disagree readings that agreed "
                       "(unsure left out); agreement with readers, not accuracy", width)]
    if "reads" in fig["sentences"] or "reliability" in fig["sentences"]:
        return [*blocks, _para(fonts, fig["sentences"].get("reliability") or "No readings, so no diagram.", width)]
    d = charts.reliability_diagram(rel["bins"], fonts, width=width, height=CHART_H + 20,
                                   x_label="model confidence in its output label (probability, 0 to 1, bins of "
                                           f"{1 / len(rel['bins']):.1f})",
                                   y_label="readings agreeing with the model (%)")
    ece = (f"Expected calibration error (Guo et al. 2017, equal-width bins): {rel['ece']:.3f} over {rel['n']} "
           "readings, the average distance between a bin's agreement and its confidence, weighted by its readings.")
    return [*blocks, _chart(d), _para(fonts, ece, width)]


@_guarded("failures", "Failed attempts by reason",
          "inputs that could not be recorded as cases, every model (the file name is left out of the reason "
          "so that the same problem counts once)")
def _failures(fig: Mapping[str, Any], fonts: FontSet, width: float) -> list[Block]:
    fails = fig["failures"]
    bar_w = 90.0

    def bar(c: Canvas, x: float, y: float, w: float, share: str) -> None:
        d = charts.share_bar(float(share), bar_w - 10)
        renderPDF.draw(d, c, x + 4, y - 8)

    cols = [Column("REASON", width - 100 - bar_w, "regular"), Column("ATTEMPTS", 50, "mono", "right"),
            Column("SHARE", 50, "mono", "right"), Column("", bar_w)]
    rows = [[r["reason"], f"{r['n']:,}", pct(r["share"]), f"{r['share']:.4f}"] for r in fails["by_reason"]]
    if fails["other"]:
        o = fails["other"]
        rows.append([f"{o['reasons']} other reasons", f"{o['n']:,}", pct(o["n"] / fails["total"]),
                     f"{o['n'] / fails['total']:.4f}"])
    total = [_para(fonts, f"{fails['total']:,} failed attempts, {fails['reasons']} different reasons.", width)]
    return [*total, *_table(fonts, cols, rows, {3: bar})[1]]


def _verification(fig: Mapping[str, Any], fonts: FontSet, width: float) -> list[Block]:
    led = fig["ledger"]
    lines = [f"Computed from ledger entries 1 to {led['head_seq']}; head entry hash:",
             led["head_hash"],
             "To check that nothing was added or changed since: `casefile verify` must succeed and name this "
             "head seq and hash (it prints the hash's first 16 digits, `--json` all of them); a ledger that grew "
             "since shows a higher seq, and the report run again on it shows what changed."]
    blocks = [_heading(fonts, "Verification", "what this report was computed from", width)]
    first = _para(fonts, lines[0], width)
    first.keep_with_next = True  # the block stays on one page: the hash never starts a page of its own
    blocks.append(first)
    blocks.append(Block(14, lambda c, x, y: text_line(c, x, y - 10, led["head_hash"], fonts.mono, 8.5),
                        keep_with_next=True))
    blocks.append(_para(fonts, lines[2], width, size=7.5))
    return blocks


SECTIONS = (_key_figures, _volume, _status, _checks, _confidence, _reads, _confusion, _reliability, _failures,
            _verification)


def _footer(c: Canvas, fonts: FontSet, fig: Mapping[str, Any], n: int, total: int, size: tuple[float, float]) -> None:
    w, _ = size
    p, led = fig["period"], fig["ledger"]
    c.setStrokeColorRGB(*RULE)
    c.setLineWidth(0.5)
    c.line(MARGIN, MARGIN + FOOTER_H - 6, w - MARGIN, MARGIN + FOOTER_H - 6)
    left = (f"casefile {__version__} period report {p['since'][:10]} to {p['until'][:10]} · ledger head seq "
            f"{led['head_seq']} · {led['head_hash'][:16]}…")
    text_line(c, MARGIN, MARGIN + 4, left, fonts.regular, 6.5, GREY)
    c.setFont(fonts.regular, 6.5)
    c.drawRightString(w - MARGIN, MARGIN + 4, f"page {n} of {total}")


def render_report(fig: Mapping[str, Any], *, made_at: datetime | None = None) -> bytes:
    """The period report as PDF bytes from ``period_figures``; same figures and ``made_at``, same bytes."""
    fonts = font_set()
    size = A4
    w, h = size
    inner = w - 2 * MARGIN
    caution = caution_block(fonts, inner, REPORT_CAUTIONS, REPORT_CAUTION_TITLE)
    bottom = MARGIN + FOOTER_H + caution.height + 2
    gap = Block(GAP, lambda c, x, y: None)
    blocks: list[Block] = [_title(fig, fonts, inner)]
    for section in SECTIONS:
        blocks.extend(section(fig, fonts, inner))
        blocks.append(gap)
    top = h - MARGIN
    pages = place_caution(paginate(blocks, top - bottom, top - bottom, lambda i: []), caution, None)
    when = (made_at or datetime.now(UTC)).astimezone(UTC)
    buf = io.BytesIO()
    saved = rl_config.useA85
    rl_config.useA85 = 0
    try:
        c = Canvas(buf, pagesize=size, invariant=1, pageCompression=1, initialFontName=fonts.regular)
        c.setDateFormatter(lambda *_: when.strftime("D:%Y%m%d%H%M%S+00'00'"))
        p, led = fig["period"], fig["ledger"]
        c.setTitle(f"Period report {p['since'][:10]} to {p['until'][:10]}")
        c.setSubject(f"casefile ledger head seq {led['head_seq']} hash {led['head_hash']}")
        c.setCreator(f"casefile {__version__}")
        c.setAuthor("casefile")
        c.setKeywords(f"ledger head {led['head_seq']} {led['head_hash']}")
        for n, page in enumerate(pages, start=1):
            _footer(c, fonts, fig, n, len(pages), size)
            y = top
            for b in page:
                b.draw(c, MARGIN, y)
                y -= b.height
            c.showPage()
        c.save()
    finally:
        rl_config.useA85 = saved
    return buf.getvalue()


__all__ = ["render_report", "pct", "p_value"]

