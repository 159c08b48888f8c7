"""Derived query rows: what each entry kind contributes to the query tables (pure functions)."""

from __future__ import annotations

import hashlib
from collections.abc import Callable
from typing import Any

from casefile.flags import case_flagged, flagging_checks

Rows = list[tuple[str, dict[str, Any]]]


def run_key(file_sha256: str, frame: int | None, model_digest: str, settings_digest: str) -> str:
    """The identity of one run: the same input, frame, model and settings never make two cases."""
    text = f"{file_sha256}|{'' if frame is None else frame}|{model_digest}|{settings_digest}"
    return hashlib.sha256(text.encode("ascii")).hexdigest()


def _checks(seq: int, b: dict[str, Any]) -> Rows:
    """One row per check; a record from an older release, without ``flags``, gets the default rule."""
    checks = b.get("checks") or []
    flagging = set(flagging_checks(checks))
    return [("case_checks", {"seq": seq, "case_id": b["case_id"], "name": c["name"], "outcome": c["outcome"],
                             "flags": 1 if c["name"] in flagging else 0}) for c in checks]


def _case(seq: int, b: dict[str, Any]) -> Rows:
    inp, model = b["input"], b["model"]
    return [("cases", {
        "seq": seq,
        "case_id": b["case_id"],
        "recorded_at": b["recorded_at"],
        "model_name": model["name"],
        "model_version": model["version"],
        "model_digest": model["digest"],
        "label": b["result"]["label"],
        "confidence": b["result"].get("confidence"),
        "status": b["status"],
        "file_name": inp["file_name"],
        "file_sha256": inp["file_sha256"],
        "run_key": run_key(inp["file_sha256"], inp.get("frame"), model["digest"], b["settings_digest"]),
        "flagged": 1 if case_flagged(b) else 0,
    }), *_checks(seq, b)]


def _failed(seq: int, b: dict[str, Any]) -> Rows:
    return [("failures", {"seq": seq, "attempted_at": b["attempted_at"], "file_name": b["file_name"],
                          "file_sha256": b.get("file_sha256"), "reason": b["reason"]})]


def _amendment(seq: int, b: dict[str, Any]) -> Rows:
    return [("amendments", {"seq": seq, "amends_seq": b["amends_seq"], "case_id": b.get("case_id")})]


def _review(seq: int, b: dict[str, Any]) -> Rows:
    return [("reviews", {"seq": seq, "case_id": b["case_id"], "reader": b["reader"], "verdict": b["verdict"],
                         "label": b.get("label"), "amends_seq": b.get("amends_seq"),
                         "draw_id": b.get("draw_id")})]


def _adjudication(seq: int, b: dict[str, Any]) -> Rows:
    return [("adjudications", {"seq": seq, "case_id": b["case_id"], "adjudicator": b["adjudicator"],
                               "label": b["label"], "draw_id": b.get("draw_id")})]


def _draw(seq: int, b: dict[str, Any]) -> Rows:
    return [("draws", {"seq": seq, "draw_id": b["draw_id"], "plan": b["plan"],
                       "population_size": b["population_size"], "sample_size": len(b["members"])})]


def _seal(seq: int, b: dict[str, Any]) -> Rows:
    return [("seals", {"seq": seq, "tree_size": b["tree_size"], "merkle_root": b["merkle_root"],
                       "signed": 1 if "signature" in b else 0})]


def _replay(seq: int, b: dict[str, Any]) -> Rows:
    return [("replays", {"seq": seq, "case_id": b["case_id"], "case_seq": b["case_seq"],
                         "reproduces": 1 if b["reproduces"] else 0})]


PROJECTORS: dict[str, Callable[[int, dict[str, Any]], Rows]] = {
    "case": _case,
    "failed": _failed,
    "amendment": _amendment,
    "review": _review,
    "adjudication": _adjudication,
    "draw": _draw,
    "seal": _seal,
    "replay": _replay,
}


def derive(seq: int, kind: str, body: dict[str, Any], blob_digests: list[str]) -> Rows:
    """All derived rows for one entry, in a fixed order."""
    rows: Rows = [("entry_blobs", {"seq": seq, "digest": d}) for d in sorted(set(blob_digests))]
    projector = PROJECTORS.get(kind)
    if projector is not None:
        rows.extend(projector(seq, body))
    return rows
