"""The period report: volumes, outcome rates, confidence drift, reader disagreement and calibration over a
period, as numbers (``period_figures``) and as a PDF in the case sheet's style (``render_report``).

One library function per command: ``casefile report`` -> ``make_report`` (the figures, and the PDF
written whole when a path is given; nothing is written to the ledger).
"""

from __future__ import annotations

import os
from datetime import datetime
from pathlib import Path
from typing import Any

from casefile.errors import OutputError
from casefile.files import write_atomic
from casefile.ledger import Ledger
from casefile.report.figures import period_figures, periods
from casefile.report.layout import p_value, pct, render_report


def make_report(ledger: Ledger, since: str, until: str, model: str | None = None, *,
                output: str | os.PathLike[str] | None = None,
                made_at: datetime | None = None) -> tuple[dict[str, Any], Path | None]:
    """The figures of the period and, with ``output``, the PDF written there (refused before anything
    is computed when its folder does not exist)."""
    if output is not None and not Path(output).resolve().parent.is_dir():
        raise OutputError(f"{output}: the folder does not exist")
    fig = period_figures(ledger, since, until, model)
    path = write_atomic(output, render_report(fig, made_at=made_at)) if output is not None else None
    return fig, path


def summary_lines(fig: dict[str, Any]) -> list[str]:
    """A few plain lines for the terminal: the period, volumes, drift, disagreement, the ledger head."""
    p, cases, ks = fig["period"], fig["cases"], fig["confidence"]["ks"]
    ov = fig["reads"]["overall"]
    lines = [f"period {p['since']} to {p['until']} ({fig['model'] or 'all models'}): {cases['total']:,} cases "
             f"(previous period {cases['previous_total']:,}), {fig['failures']['total']:,} failed attempts",
             f"flagged {pct(fig['status']['flagged_share'])}; confidence drift: "
             + (f"KS D = {ks['statistic']:.3f}, {p_value(ks['pvalue'])}" if ks else "not computed"),
             f"reader disagreement: {ov['disagreements']} of {ov['reviewed']} reviewed cases"
             + (f" ({pct(ov['rate'])}, 95 % Wilson {pct(ov['wilson_95'][0])} to {pct(ov['wilson_95'][1])})"
                if ov["reviewed"] else ""),
             f"computed from ledger head seq {fig['ledger']['head_seq']} {fig['ledger']['head_hash']}"]
    return lines


__all__ = ["make_report", "period_figures", "periods", "render_report", "summary_lines"]
