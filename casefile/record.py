"""Builds the plain-data case body (schemas/case.schema.json) and its blobs from one explained input."""

from __future__ import annotations

import hashlib
import platform
from dataclasses import dataclass
from typing import Any

import numpy as np

from casefile import __version__
from casefile.canonical import canonical_bytes
from casefile.cautions import CAUTION_TEXT
from casefile.ledger.derive import run_key


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


def software_versions(extra: dict[str, str] | None = None) -> dict[str, str]:
    import torch

    versions = {"casefile": __version__, "python": platform.python_version(),
                "torch": torch.__version__, "numpy": np.__version__}
    versions.update(extra or {})
    return versions


def _plain(value: Any) -> Any:
    """JSON-ready copy of allow-listed metadata; a value that cannot be stored exactly is left out."""
    if isinstance(value, dict):
        out = {str(k): _plain(v) for k, v in value.items()}
        return {k: v for k, v in out.items() if v is not None}
    if isinstance(value, list | tuple):
        items = [_plain(v) for v in value]
        return None if any(v is None for v in items) else items
    if isinstance(value, bool) or isinstance(value, str):
        return value
    if isinstance(value, int):
        return value if abs(value) < 2**53 else None
    if isinstance(value, float):
        return value if np.isfinite(value) else None
    return None


def _roi(card: dict[str, Any]) -> dict[str, Any]:
    """The card's region-of-interest rule (model-input pixels), kept so a sheet can draw it."""
    roi = _plain(card.get("roi"))
    return {"roi": roi} if isinstance(roi, dict) and roi.get("rule") else {}


def _top(scores: dict[str, Any], n: int = 3) -> list[dict[str, Any]]:
    ranked = sorted(((k, v) for k, v in scores.items() if v is not None), key=lambda kv: (-kv[1], kv[0]))
    return [{"label": k, "p": v} for k, v in ranked[:n]]


def build(scan: Any, loaded: Any, explanation: Any, *, settings: dict[str, Any], recorded_at: str,
          display_png: bytes, overlays: dict[str, bytes], source: str = "casefile") -> CaseRecord:
    """The case body for ``scan`` explained by ``explanation`` under ``settings`` (all plain data)."""
    exp = explanation.to_record()
    s_digest = settings_digest(settings)
    blobs: list[bytes] = [display_png]
    inp = scan.to_record()
    inp["display_blob"] = digest(display_png)
    meta = _plain(dict(getattr(scan, "metadata", {}) or {}))
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
        "software": software_versions({k: str(v) for k, v in exp.get("versions", {}).items()}),
        "input": inp,
        "model": {"name": loaded.card["name"], "version": loaded.card["version"], "digest": loaded.digest,
                  "card_digest": loaded.card_digest, "labels": list(loaded.labels),
                  "layer": settings.get("layer"), **_roi(loaded.card)},
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
