"""Small valid bodies for ledger tests (invented data, shaped like real case records)."""

from __future__ import annotations

import hashlib
from typing import Any


def digest(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def case_body(i: int, *, blob: bytes | None = None, label: str = "sound", status: str = "pass",
              model: str = "tiny", when: str = "2026-11-30T12:00:00Z") -> dict[str, Any]:
    file_digest = digest(f"file {i}".encode())
    body: dict[str, Any] = {
        "case_id": f"c-{i:06d}",
        "recorded_at": when,
        "software": {"casefile": "0.1.0"},
        "input": {"file_name": f"part_{i:04d}.png", "file_sha256": file_digest,
                  "pixel_sha256": digest(f"pixels {i}".encode()), "kind": "raster", "width": 64, "height": 64},
        "model": {"name": model, "version": "1", "digest": digest(model.encode()), "labels": ["sound", "crack"]},
        "preprocessing": {},
        "settings": {"methods": ["gradcam"]},
        "settings_digest": digest(b"settings"),
        "result": {"label": label, "label_index": 0, "confidence": 0.5 + (i % 50) / 100,
                   "scores": {"sound": 0.75, "crack": 0.25}},
        "maps": [],
        "checks": [{"name": "numerical", "value": None, "threshold": None, "outcome": status,
                    "meaning": "all scores and maps are finite numbers"}],
        "status": status,
    }
    if blob is not None:
        body["input"]["display_blob"] = digest(blob)
    return body


def amendment_body(seq: int, h: str, reason: str = "label corrected after second read") -> dict[str, Any]:
    return {"amends_seq": seq, "amends_hash": h, "author": "qa-lead", "reason": reason,
            "amended_at": "2026-12-01T09:00:00Z"}
