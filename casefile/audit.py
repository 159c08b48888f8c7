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


def amend_case(ledger: Ledger, case_id: str, *, author: str, reason: str,
               changes: dict[str, Any] | None = None) -> Any:
    """Record a correction to a case as a new amendment entry; the original stays as it was."""
    from casefile.errors import ValidationError
    from casefile.ledger import utc_now

    if not author or not author.strip():
        raise ValidationError(f"amendment of {case_id}: author is empty; say who makes the correction")
    if not reason or not reason.strip():
        raise ValidationError(f"amendment of {case_id}: reason is empty; say why the record is corrected")
    entry = ledger.case(case_id).entry
    body: dict[str, Any] = {"amends_seq": entry.seq, "amends_hash": entry.hash, "case_id": case_id,
                            "author": author.strip(), "reason": reason.strip(), "amended_at": utc_now()}
    if changes:
        body["changes"] = changes
    return ledger.append("amendment", body)


def history(ledger: Ledger, case_id: str) -> list[dict[str, Any]]:
    """Everything recorded about one case, in ledger order: the case, its amendments and reviews."""
    hist = ledger.case(case_id)
    rows = []
    for e in hist.timeline():
        row: dict[str, Any] = {"seq": e.seq, "kind": e.kind, "hash": e.hash}
        b = e.body
        if e.kind == "case":
            row.update(recorded_at=b["recorded_at"], label=b["result"]["label"],
                       confidence=b["result"]["confidence"], status=b["status"],
                       model=f"{b['model']['name']}@{b['model']['version']}")
        elif e.kind == "amendment":
            row.update(amended_at=b["amended_at"], author=b["author"], reason=b["reason"],
                       changes=b.get("changes", {}), amends_seq=b["amends_seq"])
        else:
            row.update({k: b.get(k) for k in ("reviewed_at", "reader", "verdict", "label", "note", "amends_seq")})
        rows.append(row)
    return rows


def format_history(rows: list[dict[str, Any]]) -> str:
    lines = []
    for r in rows:
        if r["kind"] == "case":
            lines.append(f"seq {r['seq']:>6}  case       {r['recorded_at']}  {r['model']}: {r['label']} "
                         f"({r['confidence']:.3f}), checks {r['status']}")
        elif r["kind"] == "amendment":
            lines.append(f"seq {r['seq']:>6}  amendment  {r['amended_at']}  by {r['author']}: {r['reason']} "
                         f"{r['changes'] or ''}".rstrip())
        else:
            extra = f" label {r['label']}" if r.get("label") else ""
            lines.append(f"seq {r['seq']:>6}  review     {r.get('reviewed_at')}  {r['reader']}: {r['verdict']}{extra}")
    return "\n".join(lines)
