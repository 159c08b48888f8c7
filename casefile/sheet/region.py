"""Where the model card's region of interest falls on the sheet's pictures, and how to say it in words.

The card states its rule in model-input pixels (``model.roi`` in the case body); the model input is
the whole picture resized, so a box at model-input size is the same fraction of the displayed picture.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from .words import number

LEGEND_HEAD = "region of interest (card): inside the dashed line"


@dataclass(frozen=True)
class Region:
    """``box`` = (x0, y0, x1, y1) as fractions of the picture's width and height from its top left,
    or None when no line is drawn; ``words`` says what the rule is (or why nothing is drawn)."""

    box: tuple[float, float, float, float] | None
    words: str


def _num(v: Any) -> bool:
    return isinstance(v, int | float) and not isinstance(v, bool)


def model_input_size(case: Mapping[str, Any]) -> tuple[int, int] | None:
    """(height, width) of the model input, from the preprocessing record, else the largest map."""
    for rec in (case.get("preprocessing"), (case.get("settings") or {}).get("preprocessing")):
        spec = rec.get("input") if isinstance(rec, Mapping) else None
        if isinstance(spec, Mapping) and _num(spec.get("height")) and _num(spec.get("width")):
            if spec["height"] > 0 and spec["width"] > 0:
                return int(spec["height"]), int(spec["width"])
    shapes = [m.get("shape") for m in case.get("maps") or [] if isinstance(m, Mapping)]
    shapes = [s for s in shapes if isinstance(s, list) and len(s) == 2 and all(_num(v) and v > 0 for v in s)]
    if shapes:
        h, w = max(shapes, key=lambda s: s[0] * s[1])
        return int(h), int(w)
    return None


def region(case: Mapping[str, Any]) -> Region:
    """The card's region of interest for this case, as a box on the pictures and in words."""
    roi = (case.get("model") or {}).get("roi")
    if not isinstance(roi, Mapping) or "rule" not in roi:
        return Region(None, "region of interest: not in this record (the card's rule was not stored with it)")
    rule = str(roi.get("rule"))
    if rule == "whole":
        return Region(None, "region of interest (card): the whole picture, so no line is drawn")
    size = model_input_size(case)
    if size is None:
        return Region(None, f"region of interest (card): rule {rule}; model input size not recorded, so no "
                            "line is drawn")
    h, w = size
    if rule == "border" and _num(roi.get("pixels")):
        n = float(roi["pixels"])
        box = (n / w, n / h, 1 - n / w, 1 - n / h)
        words = f"{LEGEND_HEAD}; a border of {number(roi['pixels'])} px of the {w} × {h} px model input left out"
    elif rule == "rect" and all(_num(roi.get(k)) for k in ("x0", "y0", "x1", "y1")):
        box = (roi["x0"] / w, roi["y0"] / h, roi["x1"] / w, roi["y1"] / h)
        words = (f"{LEGEND_HEAD}; x {number(roi['x0'])} to {number(roi['x1'])} px, y {number(roi['y0'])} to "
                 f"{number(roi['y1'])} px of the {w} × {h} px model input")
    else:
        return Region(None, f"region of interest (card): rule {rule} cannot be drawn")
    x0, y0, x1, y1 = (min(max(float(v), 0.0), 1.0) for v in box)
    if x1 <= x0 or y1 <= y0:
        return Region(None, "region of interest (card): empty at this size, so no line is drawn")
    return Region((x0, y0, x1, y1), words)
