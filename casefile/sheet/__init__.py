"""The case sheet room: colour map and overlays, the PDF case sheet, and the caution texts."""

from __future__ import annotations

from typing import Any

from casefile.cautions import CAUTION_TEXT, CAUTIONS

from ..errors import InputError, LedgerError
from .batch import render_many
from .colours import colour_lut, overlay, png_bytes, scale_bar
from .layout import render_sheet

__all__ = ["CAUTIONS", "CAUTION_TEXT", "colour_lut", "overlay", "png_bytes", "render_many", "render_sheet",
           "scale_bar", "sheet_for_case", "sheets_for_cases", "case_inputs"]


def case_inputs(ledger: Any, case_id: str) -> dict[str, Any]:
    """What ``render_sheet`` needs for one case, read through the Ledger API (see DEVELOPERS.md)."""
    history = ledger.case(case_id)
    if history is None or getattr(history, "entry", None) is None:
        raise LedgerError(f"case {case_id}: not found in the ledger")
    seq, _head_hash = ledger.head()
    def bodies(entries: Any) -> list[dict[str, Any]]:
        return [{**e.body, "seq": e.seq} if hasattr(e, "body") else dict(e) for e in entries or []]

    replays = bodies(getattr(history, "replays", None))
    return {"case": history.entry.body, "blob": ledger.blob, "reviews": bodies(getattr(history, "reviews", None)),
            "amendments": bodies(getattr(history, "amendments", None)), "as_of_seq": int(seq),
            "entry_hash": history.entry.hash, "replay": replays[-1] if replays else None}


def sheet_for_case(ledger: Any, case_id: str, **opts: Any) -> bytes:
    """The PDF case sheet of ``case_id`` as recorded in ``ledger``; ``opts`` go to ``render_sheet``."""
    inputs = case_inputs(ledger, case_id)
    unknown = set(opts) - {"page_size", "fixed_time"}
    if unknown:
        raise InputError(f"sheet: unknown option(s) {', '.join(sorted(unknown))}")
    return render_sheet(inputs.pop("case"), **inputs, **opts)


def sheets_for_cases(ledger: Any, case_ids: Any, folder: Any, **opts: Any) -> list[Any]:
    """Write the sheet of each case in ``case_ids`` to ``folder``; one case in memory at a time."""
    return render_many((case_inputs(ledger, cid) for cid in case_ids), folder, **opts)
