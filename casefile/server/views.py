"""What the review page shows, as plain data read from the ledger: a reader's queue, one case for one
draw, and the pictures of a case (the display image, each map's stored overlay, each map as a see-through
layer for the opacity control). No web framework here.

A case is in a reader's queue for a draw when it is one of the draw's members; it *waits* until the
reader has a current reading of it for that draw. Other readers' verdicts on the case are handed out
only once this reader has answered for this draw, and the summary leaves out every case still waiting
for this reader, so reads stay independent.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from casefile.errors import CasefileError
from casefile.ledger import Entry, Ledger
from casefile.review.readings import current_readings
from casefile.review.stats import summarise_data
from casefile.sheet.colours import OVERLAY_RAMP, apply_map, normalise_map, png_bytes, scale_bar

DRAW_ID = re.compile(r"^d-[0-9a-f]{12}$")
CASE_ID = re.compile(r"^[A-Za-z0-9_-][A-Za-z0-9._-]{3,63}$")  # the case schema's ids, never "." or ".."
METHOD = re.compile(r"^[a-z][a-z0-9_-]{0,31}$")
VIEWS = ("overlay", "side")
OPACITY_STEPS = tuple(range(0, 101, 10))
DEFAULT_OPACITY = 60
LAYER_MAX_PIXELS = 4096 * 4096
METHOD_NAMES = {"gradcam": "Grad-CAM", "occlusion": "occlusion", "gradient": "gradient saliency"}


class NotInQueue(CasefileError):
    """The draw, case, map or picture asked for is not one this reader may open."""


@dataclass(frozen=True)
class Place:
    draw: Entry
    case: Entry


def _readings(ledger: Ledger) -> dict[tuple[str, str, str | None], dict[str, Any]]:
    return current_readings({**e.body, "seq": e.seq} for e in ledger.entries("review"))


def queue(ledger: Ledger, reader: str) -> list[dict[str, Any]]:
    """Per draw (newest first): its id, plan, when drawn, and its members split into ``waiting`` and
    ``answered`` for this reader, each a dict of case_id, label, confidence, status."""
    readings = _readings(ledger)
    rows = {r["case_id"]: r for r in ledger.cases()}
    out = []
    for e in ledger.entries("draw"):
        b = e.body
        waiting, answered = [], []
        for m in b["members"]:
            row = rows.get(m["case_id"], {})
            item = {"case_id": m["case_id"], "label": row.get("label"), "confidence": row.get("confidence"),
                    "status": row.get("status")}
            mine = readings.get((m["case_id"], reader, b["draw_id"]))
            if mine is None:
                waiting.append(item)
            else:
                answered.append({**item, "verdict": mine["verdict"]})
        out.append({"draw_id": b["draw_id"], "plan": b["plan"], "drawn_at": b.get("drawn_at"),
                    "waiting": waiting, "answered": answered})
    return out[::-1]


def summary(ledger: Ledger, reader: str) -> dict[str, Any]:
    """The second-read summary as this reader may see it: ``casefile.review.stats.summarise_data`` over
    the ledger, leaving out every reading and adjudication of a case still waiting for this reader in
    any draw, so the figures say nothing about cases the reader has yet to read. A draw with cases
    waiting carries ``waiting_for_you`` (their number) and its figures are not shown on the page."""
    waiting: dict[str, int] = {}
    held: set[str] = set()
    for d in queue(ledger, reader):
        if d["waiting"]:
            waiting[d["draw_id"]] = len(d["waiting"])
            held.update(c["case_id"] for c in d["waiting"])
    rows = ledger.cases()
    out = summarise_data([e.body for e in ledger.entries("draw")],
                         [{**e.body, "seq": e.seq} for e in ledger.entries("review") if e.body["case_id"] not in held],
                         {r["case_id"]: r["label"] for r in rows},
                         [e.body for e in ledger.entries("adjudication") if e.body["case_id"] not in held],
                         {r["case_id"]: r["confidence"] for r in rows})
    for d in out["draws"]:
        if d["draw_id"] in waiting:
            d["waiting_for_you"] = waiting[d["draw_id"]]
    out["left_out"] = len(held)
    return out


def place(ledger: Ledger, draw_id: str, case_id: str) -> Place:
    """The draw and case entries for a queue address; ``NotInQueue`` unless the case is a member."""
    if not DRAW_ID.fullmatch(draw_id or "") or not CASE_ID.fullmatch(case_id or ""):
        raise NotInQueue("no such draw or case")
    draw_entry = next((e for e in ledger.entries("draw") if e.body["draw_id"] == draw_id), None)
    if draw_entry is None or not any(m["case_id"] == case_id for m in draw_entry.body["members"]):
        raise NotInQueue(f"case {case_id} is not in draw {draw_id}")
    try:
        case_entry = ledger.case(case_id).entry
    except CasefileError:
        raise NotInQueue(f"case {case_id} is not in the ledger") from None
    return Place(draw_entry, case_entry)


def my_reading(ledger: Ledger, reader: str, draw_id: str, case_id: str) -> dict[str, Any] | None:
    return _readings(ledger).get((case_id, reader, draw_id))


def case_view(ledger: Ledger, where: Place, reader: str) -> dict[str, Any]:
    """Everything the case page shows. ``others`` (other readers' current readings of this case, for any
    draw) is empty until this reader has answered for this draw; ``next_waiting`` is the next member of
    the draw still waiting for this reader, or None."""
    body = where.case.body
    draw_id = where.draw.body["draw_id"]
    readings = _readings(ledger)
    mine = readings.get((body["case_id"], reader, draw_id))
    following = next((m["case_id"] for m in where.draw.body["members"] if m["case_id"] != body["case_id"]
                      and (m["case_id"], reader, draw_id) not in readings), None)
    others: list[dict[str, Any]] = []
    if mine is not None:
        others = sorted((dict(r) for (c, who, _), r in readings.items() if c == body["case_id"] and who != reader),
                        key=lambda r: r["seq"])
    maps = [{"method": m["method"], "title": METHOD_NAMES.get(m["method"], m["method"]), "overlay": bool(m.get("overlay_blob")), "layer": bool(m.get("raw_blob"))}
            for m in body.get("maps", []) if METHOD.fullmatch(str(m.get("method", "")))]
    result = body["result"]
    return {
        "case_id": body["case_id"], "draw_id": draw_id, "plan": where.draw.body["plan"],
        "recorded_at": body["recorded_at"], "file_name": body["input"].get("file_name"),
        "width": body["input"].get("width"), "height": body["input"].get("height"),
        "has_display": bool(body["input"].get("display_blob")),
        "model": {"name": body["model"]["name"], "version": body["model"]["version"],
                  "notes": list(body["model"].get("notes") or [])},
        "labels": list(body["model"]["labels"]), "label": result["label"],
        "confidence": result.get("confidence"), "top": list(result.get("top") or []),
        "status": body["status"], "flags": list(body.get("flags") or []),
        "checks": list(body.get("checks") or []), "maps": maps, "mine": mine, "others": others,
        "next_waiting": following,
    }


def _map_entry(body: Mapping[str, Any], method: str) -> Mapping[str, Any]:
    found = next((m for m in body.get("maps", []) if m.get("method") == method), None)
    if found is None or not METHOD.fullmatch(method or ""):
        raise NotInQueue(f"case {body['case_id']} has no {method!r} map")
    return found


def display_png(ledger: Ledger, where: Place) -> bytes:
    digest = where.case.body["input"].get("display_blob")
    if not digest:
        raise NotInQueue(f"case {where.case.body['case_id']} has no display image")
    return ledger.blob(digest)


def overlay_png(ledger: Ledger, where: Place, method: str) -> bytes:
    """The overlay picture recorded with the case (the map drawn over the image, as on the sheet)."""
    m = _map_entry(where.case.body, method)
    if not m.get("overlay_blob"):
        raise NotInQueue(f"case {where.case.body['case_id']}: the {method} map has no overlay picture")
    return ledger.blob(m["overlay_blob"])


def layer_png(ledger: Ledger, where: Place, method: str) -> bytes:
    """The map alone as an RGBA picture at the display size, for laying over the image in the browser:
    the sheet's colour map, and see-through where the map is low (the sheet's overlay ramp), so the
    page's opacity control scales what the overlay would show."""
    body = where.case.body
    m = _map_entry(body, method)
    shape = m.get("shape") or []
    if not m.get("raw_blob") or len(shape) != 2:
        raise NotInQueue(f"case {body['case_id']}: the {method} map has no raw values")
    h, w = int(shape[0]), int(shape[1])
    raw = np.frombuffer(ledger.blob(m["raw_blob"]), dtype="<f4")
    if raw.size != h * w:
        raise NotInQueue(f"case {body['case_id']}: the {method} map's values do not fill its shape")
    size = (int(body["input"].get("height") or h), int(body["input"].get("width") or w))
    if size[0] * size[1] > LAYER_MAX_PIXELS:
        size = (h, w)
    values = normalise_map(raw.reshape(h, w), size)
    low, high = OVERLAY_RAMP
    alpha = np.clip((values - low) / (high - low), 0.0, 1.0)
    rgba = np.dstack([apply_map(values), np.round(alpha * 255).astype(np.uint8)])
    return png_bytes(rgba)


def scale_png() -> bytes:
    """The colour scale of the maps, from little influence (left) to strong (right)."""
    return png_bytes(scale_bar(256, 14))


def opacity_step(text: str | None) -> int:
    """The opacity asked for in percent, to the nearest step of ten; the default when not a number."""
    try:
        value = int(float(text)) if text is not None else DEFAULT_OPACITY
    except (ValueError, OverflowError):
        return DEFAULT_OPACITY
    return min(OPACITY_STEPS, key=lambda s: abs(s - value))


__all__ = ["CASE_ID", "DRAW_ID", "DEFAULT_OPACITY", "NotInQueue", "OPACITY_STEPS", "Place", "VIEWS", "case_view",
           "display_png", "layer_png", "my_reading", "opacity_step", "overlay_png", "place", "queue", "scale_png",
           "summary"]
