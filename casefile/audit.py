"""Audit listings: rows for cases (or entries of one kind) with filters, as a table, JSON lines or CSV."""

from __future__ import annotations

import csv
from typing import IO, Any

from casefile.ledger import Ledger

CASE_COLUMNS = ["seq", "case_id", "recorded_at", "model_name", "model_version", "label", "confidence",
                "status", "file_name", "file_sha256", "model_digest"]


def audit_rows(ledger: Ledger, *, kind: str | None = None, model: str | None = None, label: str | None = None,
               status: str | None = None, since: str | None = None, until: str | None = None) -> list[dict[str, Any]]:
    """Case rows from the query table, or, with ``kind``, every entry of that kind (seq, hash, body)."""
    if kind and kind != "case":
        return [{"seq": e.seq, "kind": e.kind, "hash": e.hash, **e.body} for e in ledger.entries(kind=kind)]
    rows = ledger.cases(model=model, label=label, status=status, since=since, until=until)
    return [{k: r[k] for k in CASE_COLUMNS} for r in rows]


def write_csv(rows: list[dict[str, Any]], out: IO[str]) -> None:
    cols = list(rows[0]) if rows else CASE_COLUMNS
    w = csv.DictWriter(out, fieldnames=cols, extrasaction="ignore", lineterminator="\n")
    w.writeheader()
    for r in rows:
        w.writerow({k: (v if not isinstance(v, dict | list) else str(v)) for k, v in r.items()})


def format_table(rows: list[dict[str, Any]]) -> str:
    if not rows:
        return "no matching entries"
    if "case_id" in rows[0] and "status" in rows[0]:
        lines = [f"{'seq':>6}  {'case':<20} {'recorded (UTC)':<20} {'model':<24} {'label':<14} {'conf':>5}  status"]
        for r in rows:
            conf = "" if r["confidence"] is None else f"{r['confidence']:.2f}"
            model = f"{r['model_name']}@{r['model_version']}"
            lines.append(f"{r['seq']:>6}  {r['case_id']:<20} {r['recorded_at']:<20} {model:<24.24} "
                         f"{r['label']:<14.14} {conf:>5}  {r['status']}")
        lines.append(f"{len(rows)} case(s)")
        return "\n".join(lines)
    return "\n".join(f"{r['seq']:>6}  {r['kind']:<10} {r['hash'][:16]}…" for r in rows)
