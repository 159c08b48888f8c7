"""Shared fixtures for the review tests: a small ledger of invented cases."""

import hashlib

import pytest

from casefile.ledger import Ledger


def _digest(text):
    return hashlib.sha256(text.encode()).hexdigest()


def case_body(i, label, status):
    """An invented case record, shaped as schemas/case.schema.json asks."""
    return {
        "case_id": f"rv-{i:05d}", "recorded_at": f"2026-11-{1 + i % 28:02d}T10:00:00Z",
        "software": {"casefile": "0.1.0"},
        "input": {"file_name": f"part_{i}.png", "file_sha256": _digest(f"f{i}"), "pixel_sha256": _digest(f"p{i}"),
                  "kind": "raster", "width": 32, "height": 32},
        "model": {"name": "tiny", "version": "1", "digest": _digest("tiny"), "labels": ["sound", "crack"]},
        "preprocessing": {}, "settings": {}, "settings_digest": _digest(f"s{i}"),
        "result": {"label": label, "label_index": 0 if label == "sound" else 1, "confidence": 0.8,
                   "scores": {"sound": 0.8, "crack": 0.2}},
        "maps": [], "checks": [], "status": status,
    }


@pytest.fixture()
def ledger(tmp_path):
    led = Ledger(str(tmp_path / "review.db"))
    statuses = ["pass", "pass", "warn", "pass", "fail", "not-run"]
    led.append_many([("case", case_body(i, "crack" if i % 3 == 0 else "sound", statuses[i % 6]), None)
                     for i in range(40)])
    yield led
    led.close()
