"""Builds the plain-data case body (schemas/case.schema.json) and its blobs from one explained input."""

from __future__ import annotations

import hashlib
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from casefile.canonical import canonical_bytes, json_ready
from casefile.cautions import CAUTION_TEXT, WEIGHTS_NOT_PINNED
from casefile.ledger.derive import run_key
from casefile.software import software_versions

if TYPE_CHECKING:  # types only: the record is plain data and imports no model code at run time
    from casefile.explain import Explanation
    from casefile.imaging import Scan
    from casefile.models import LoadedModel


@dataclass(frozen=True)
class CaseRecord:
    """A case body ready for the ledger and the blobs it refers to."""

    body: dict[str, Any]
    blobs: list[bytes]

    @property
    def case_id(self) -> str:
        return self.body["case_id"]


def digest(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def settings_digest(settings: dict[str, Any]) -> str:
    """SHA-256 of the canonical JSON of the run settings: the same settings give the same digest anywhere."""
    return digest(canonical_bytes(settings))


def case_id_for(file_sha256: str, frame: int | None, model_digest: str, settings_hash: str) -> str:
    """Case ids are derived from what was run, so the same run can never get two ids."""
    return "cf-" + run_key(file_sha256, frame, model_digest, settings_hash)[:16]


def _roi(card: dict[str, Any]) -> dict[str, Any]:
    """The card's region-of-interest rule (model-input pixels), kept so a sheet can draw it."""
    roi = json_ready(card.get("roi"), on_bad="drop")
    return {"roi": roi} if isinstance(roi, dict) and roi.get("rule") else {}


def _identity(loaded: LoadedModel) -> dict[str, Any]:
    """Whether the card pinned these weights, and the model's notes (the pin note first when it did not)."""
    notes = ([] if loaded.weights_pinned else [WEIGHTS_NOT_PINNED]) + list(loaded.notes)
    return {"weights_pinned": bool(loaded.weights_pinned), **({"notes": notes} if notes else {})}


def _top(scores: dict[str, Any], n: int = 3) -> list[dict[str, Any]]:
    ranked = sorted(((k, v) for k, v in scores.items() if v is not None), key=lambda kv: (-kv[1], kv[0]))
    return [{"label": k, "p": v} for k, v in ranked[:n]]


def build(scan: Scan, loaded: LoadedModel, explanation: Explanation, *, settings: dict[str, Any], recorded_at: str,
          display_png: bytes, overlays: dict[str, bytes], source: str = "casefile") -> CaseRecord:
    """The case body for ``scan`` explained by ``explanation`` under ``settings`` (all plain data)."""
    exp = explanation.to_record()
    s_digest = settings_digest(settings)
    blobs: list[bytes] = [display_png]
    inp = scan.to_record()
    inp["display_blob"] = digest(display_png)
    meta = json_ready(dict(getattr(scan, "metadata", {}) or {}), on_bad="drop")
    if meta:
        inp["metadata"] = meta  # the imaging room's allow-list of technical attributes only
    maps = []
    for m in exp["maps"]:
        raw = explanation.map_bytes(m["method"])
        entry = {**m, "raw_blob": digest(raw), "dtype": "float32-le"}
        blobs.append(raw)
        if m["method"] in overlays:
            entry["overlay_blob"] = digest(overlays[m["method"]])
            blobs.append(overlays[m["method"]])
        maps.append(entry)
    body = {
        "case_id": case_id_for(scan.file_sha256, scan.frame, loaded.digest, s_digest),
        "recorded_at": recorded_at,
        "software": software_versions(exp.get("versions")),
        "input": inp,
        "model": {"name": loaded.card["name"], "version": loaded.card["version"], "digest": loaded.digest,
                  "card_digest": loaded.card_digest, "labels": list(loaded.labels),
                  "layer": settings.get("layer"), **_roi(loaded.card), **_identity(loaded)},
        "preprocessing": loaded.preprocessing_record(scan),
        "settings": settings,
        "settings_digest": s_digest,
        "result": {"label": exp["label"], "label_index": exp["label_index"], "confidence": exp["confidence"],
                   "scores": exp["scores"], "top": _top(exp["scores"]), "source": source},
        "maps": maps,
        "checks": exp["checks"],
        "status": exp["status"],
        "flagged": exp["flagged"],
        "flags": exp["flags"],
        "intended_use": loaded.card.get("intended_use", ""),
        "cautions": CAUTION_TEXT,
    }
    # one copy of each blob, in a fixed order
    unique = list({digest(b): b for b in blobs}.values())
    return CaseRecord(body, unique)
