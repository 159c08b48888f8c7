"""Invented case records spread over days, for the period report's tests, demo and benchmark.

The records are shaped as ``schemas/case.schema.json`` asks but carry no maps or pictures: the report
reads only the query tables. Everything comes from a seed; no real parts, people or data sets. A model
version change part-way through (``tiny-cast`` 1.0 to 1.1) lowers the confidence a little, so the
report's drift signal has something to find.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterator
from datetime import UTC, datetime, timedelta
from itertools import chain
from typing import Any

import numpy as np

LABELS = ("sound", "porosity", "crack")
CHECKS = ("numerical", "confidence", "randomisation", "method_agreement", "deletion", "region_focus")
# per check: chance of warn, chance of fail (invented; region_focus is the one that catches shortcuts)
RATES = {"numerical": (0.0, 0.002), "confidence": (0.08, 0.02), "randomisation": (0.0, 0.04),
         "method_agreement": (0.05, 0.02), "deletion": (0.06, 0.03), "region_focus": (0.07, 0.03)}
RANK = {"pass": 0, "not-run": 1, "warn": 2, "fail": 3}
FAILURE_REASONS = ("file is truncated: 4,096 of 65,536 bytes of pixel data",
                   "not an image casefile can read (neither DICOM nor a raster format)",
                   "multi-frame file with 12 frames; choose one with frame=N",
                   "image of 9,000 x 9,000 pixels is over the site limit of 40,000,000")


def _digest(text: str) -> str:
    return hashlib.sha256(text.encode()).hexdigest()


def _checks(rng: np.random.Generator, top: float) -> list[dict[str, Any]]:
    out = []
    for name in CHECKS:
        warn, fail = RATES[name]
        if name == "confidence":
            outcome = "fail" if top < 0.45 else "warn" if top < 0.6 else "pass"
        elif name == "randomisation" and rng.random() < 0.05:
            outcome = "not-run"
        else:
            u = rng.random()
            outcome = "fail" if u < fail else "warn" if u < fail + warn else "pass"
        out.append({"name": name, "value": None, "threshold": None, "outcome": outcome,
                    "meaning": f"invented outcome of the {name} check"})
    return out


def case_bodies(n: int, start: str = "2026-09-01", days: int = 90, seed: int = 0,
                switch_day: int | None = None) -> Iterator[dict[str, Any]]:
    """``n`` case bodies recorded over ``days`` days from ``start`` (UTC), in time order; from
    ``switch_day`` (default: two thirds in) the model is version 1.1, slightly less confident."""
    rng = np.random.default_rng(seed)
    t0 = datetime.strptime(start, "%Y-%m-%d").replace(tzinfo=UTC)
    switch = days * 2 // 3 if switch_day is None else switch_day
    offsets = np.sort(rng.uniform(0, days * 86400, size=n))
    for i, off in enumerate(offsets):
        when = t0 + timedelta(seconds=int(off))
        version = "1.1" if (when - t0).days >= switch else "1.0"
        a, b = (12.0, 2.0) if version == "1.0" else (8.0, 2.2)
        top = float(np.clip(rng.beta(a, b), 1 / len(LABELS) + 1e-3, 0.999))
        k = int(rng.choice(len(LABELS), p=(0.7, 0.2, 0.1)))
        rest = (1 - top) / (len(LABELS) - 1)
        scores = {lab: (top if j == k else rest) for j, lab in enumerate(LABELS)}
        checks = _checks(rng, top)
        status = max((c["outcome"] for c in checks), key=RANK.__getitem__)
        yield {
            "case_id": f"cf-{_digest(f'period-{seed}-{i}')[:16]}",
            "recorded_at": when.strftime("%Y-%m-%dT%H:%M:%SZ"),
            "software": {"casefile": "0.1.0"},
            "input": {"file_name": f"part_{i:06d}.png", "file_sha256": _digest(f"file-{seed}-{i}"),
                      "pixel_sha256": _digest(f"pixels-{seed}-{i}"), "kind": "raster", "width": 64, "height": 64},
            "model": {"name": "tiny-cast", "version": version, "digest": _digest(f"tiny-cast-{version}"),
                      "labels": list(LABELS)},
            "preprocessing": {}, "settings": {}, "settings_digest": _digest("settings"),
            "result": {"label": LABELS[k], "label_index": k, "confidence": round(top, 6), "scores": scores},
            "maps": [], "checks": checks, "status": status,
        }


def failed_bodies(n: int, start: str = "2026-09-01", days: int = 90, seed: int = 0) -> Iterator[dict[str, Any]]:
    """``n`` failed attempts over the same days; each reason starts with its file's name, as recorded."""
    rng = np.random.default_rng(seed + 1)
    t0 = datetime.strptime(start, "%Y-%m-%d").replace(tzinfo=UTC)
    for i, off in enumerate(np.sort(rng.uniform(0, days * 86400, size=n))):
        name = f"bad_{i:05d}.dcm"
        why = FAILURE_REASONS[int(rng.choice(len(FAILURE_REASONS), p=(0.5, 0.3, 0.15, 0.05)))]
        yield {"attempted_at": (t0 + timedelta(seconds=int(off))).strftime("%Y-%m-%dT%H:%M:%SZ"),
               "file_name": name, "reason": f"{name}: {why}", "stage": "load"}


def reading(case: dict[str, Any], case_seq: int, reader: str, rng: np.random.Generator,
            draw_id: str | None = None) -> dict[str, Any]:
    """An invented second reading: readers agree more often with confident outputs."""
    conf = case["result"]["confidence"]
    u = rng.random()
    body: dict[str, Any] = {"case_id": case["case_id"], "case_seq": case_seq, "reader": reader,
                            "reviewed_at": case["recorded_at"]}
    if u < 0.04:
        body["verdict"] = "unsure"
    elif rng.random() < 0.35 + 0.6 * conf:
        body["verdict"] = "agree"
    else:
        body["verdict"] = "disagree"
        others = [lab for lab in LABELS if lab != case["result"]["label"]]
        body["label"] = others[int(rng.integers(len(others)))]
    if draw_id is not None:
        body["draw_id"] = draw_id
    return body


def populate(ledger: Any, n: int, *, start: str = "2026-09-01", days: int = 90, seed: int = 0,
             failures: int = 0, chunk: int = 2000) -> list[tuple[int, dict[str, Any]]]:
    """Append ``n`` invented cases and ``failures`` failed attempts to ``ledger`` (a casefile Ledger), a
    chunk at a time; returns (seq, body) of the cases of the last chunk only, to keep memory flat."""
    last: list[tuple[int, dict[str, Any]]] = []
    batch: list[tuple[str, dict[str, Any], None]] = []
    items = chain((("case", b) for b in case_bodies(n, start, days, seed)),
                  (("failed", b) for b in failed_bodies(failures, start, days, seed)))
    for kind, body in items:
        batch.append((kind, body, None))
        if len(batch) >= chunk:
            last = [(e.seq, e.body) for e in ledger.append_many(batch) if e.kind == "case"]
            batch = []
    if batch:
        last = [(e.seq, e.body) for e in ledger.append_many(batch) if e.kind == "case"]
    return last


def read_draw(ledger: Any, draw_body: dict[str, Any], readers: tuple[str, ...] = ("reader-a", "reader-b"),
              seed: int = 0) -> int:
    """Append one invented reading per reader of every member of a recorded draw; returns how many."""
    rng = np.random.default_rng(seed + 2)
    items = []
    for m in draw_body["members"]:
        entry = ledger.get(int(m["seq"]))
        for r in readers:
            items.append(("review", reading(entry.body, entry.seq, r, rng, draw_body["draw_id"]), None))
    ledger.append_many(items)
    return len(items)


__all__ = ["CHECKS", "FAILURE_REASONS", "LABELS", "case_bodies", "failed_bodies", "populate", "read_draw", "reading"]
