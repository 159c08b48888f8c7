"""Audit listings: rows for cases (or entries of one kind) with filters, as a table, JSON lines or CSV.

Every case row says which checks warned or failed and which of them sent the case to a person (its
flags), not only the worst outcome. ``checks=[("region_focus", "fail")]`` keeps the cases whose check
had that outcome (several pairs: all of them); the rows come from the ``case_checks`` query table.
"""

from __future__ import annotations

import csv
from collections.abc import Sequence
from typing import IO, Any

from sqlalchemy import select

from casefile.errors import ValidationError
from casefile.flags import CHECK_NAMES, OUTCOMES, case_flagged, flagging_checks
from casefile.labels import check_label
from casefile.ledger import Entry, Ledger, utc_now
from casefile.ledger import tables as t

CASE_COLUMNS = ["seq", "case_id", "recorded_at", "model_name", "model_version", "label", "confidence",
                "status", "flagged", "file_name", "file_sha256", "model_digest"]
CHECK_PREFIX = "check_"


def parse_check(text: str) -> tuple[str, str]:
    """``NAME=OUTCOME`` -> (name, outcome); a one-line ValidationError naming what is wrong (the text is
    quoted in it; the caller adds where it came from)."""
    name, sep, outcome = text.partition("=")
    name, outcome = name.strip(), outcome.strip()
    if not sep or not name or not outcome:
        raise ValidationError(f"{text!r}: give NAME=OUTCOME, e.g. region_focus=fail")
    if name not in CHECK_NAMES:
        raise ValidationError(f"{text!r}: unknown check {name!r}; checks: {', '.join(CHECK_NAMES)}")
    if outcome not in OUTCOMES:
        raise ValidationError(f"{text!r}: outcome {outcome!r} is not one of {', '.join(OUTCOMES)}")
    return name, outcome


def _seqs_with(ledger: Ledger, name: str, outcome: str) -> set[int]:
    q = select(t.case_checks.c.seq).where((t.case_checks.c.name == name) & (t.case_checks.c.outcome == outcome))
    with ledger.engine.connect() as conn:
        return {int(r[0]) for r in conn.execute(q)}


def _checks_by_seq(ledger: Ledger, first: int, last: int) -> dict[int, list[dict[str, Any]]]:
    """The check rows of the cases with seq ``first`` to ``last``, by seq (only that stretch is read)."""
    order = {n: i for i, n in enumerate(CHECK_NAMES)}
    out: dict[int, list[dict[str, Any]]] = {}
    cc = t.case_checks
    q = select(cc).where(cc.c.seq.between(first, last)).order_by(cc.c.seq)
    with ledger.engine.connect() as conn:
        for r in conn.execute(q):
            out.setdefault(int(r.seq), []).append(dict(r._mapping))
    for rows in out.values():
        rows.sort(key=lambda r: (order.get(r["name"], len(order)), r["name"]))
    return out


def _case_row(r: dict[str, Any], checks: list[dict[str, Any]]) -> dict[str, Any]:
    row = {k: r[k] for k in CASE_COLUMNS}
    row["flagged"] = bool(r["flagged"])
    row["checks"] = {c["name"]: c["outcome"] for c in checks}
    row["flags"] = [c["name"] for c in checks if c["flags"]]
    return row


def audit_rows(ledger: Ledger, *, kind: str | None = None, model: str | None = None, label: str | None = None,
               status: str | None = None, since: str | None = None, until: str | None = None,
               checks: Sequence[tuple[str, str]] = (), flagged: bool | None = None) -> list[dict[str, Any]]:
    """Case rows from the query tables, or, with ``kind``, every entry of that kind (seq, hash, body).

    A case row holds the ``cases`` columns, ``flagged``, ``checks`` (name -> outcome) and ``flags``
    (names of the checks that flagged it)."""
    if kind and kind != "case":
        if checks or flagged is not None:
            raise ValidationError(f"--check and --flagged select cases, not {kind} entries")
        return [{"seq": e.seq, "kind": e.kind, "hash": e.hash, **e.body} for e in ledger.entries(kind=kind)]
    rows = ledger.cases(model=model, label=label, status=status, since=since, until=until)
    for name, outcome in checks:
        keep = _seqs_with(ledger, name, outcome)
        rows = [r for r in rows if int(r["seq"]) in keep]
    if flagged is not None:
        rows = [r for r in rows if bool(r["flagged"]) == flagged]
    if not rows:
        return []
    by_seq = _checks_by_seq(ledger, min(int(r["seq"]) for r in rows), max(int(r["seq"]) for r in rows))
    return [_case_row(r, by_seq.get(int(r["seq"]), [])) for r in rows]


def _check_columns(rows: list[dict[str, Any]]) -> list[str]:
    seen = {n for r in rows for n in r.get("checks", {})}
    names = [n for n in CHECK_NAMES if n in seen or not rows] + sorted(seen - set(CHECK_NAMES))
    return [CHECK_PREFIX + n for n in names]


def write_csv(rows: list[dict[str, Any]], out: IO[str]) -> None:
    """Case rows with one column per check (``check_<name>``: its outcome) and ``flags`` (names, ``;``);
    entry rows with their own fields."""
    if rows and "checks" not in rows[0]:
        cols = list(rows[0])
        flat = rows
    else:
        cols = [*CASE_COLUMNS, "flags", *_check_columns(rows)]
        flat = [{**{k: v for k, v in r.items() if k not in ("checks", "flags")},
                 "flags": ";".join(r["flags"]),
                 **{CHECK_PREFIX + n: o for n, o in r["checks"].items()}} for r in rows]
    w = csv.DictWriter(out, fieldnames=cols, extrasaction="ignore", lineterminator="\n")
    w.writeheader()
    for r in flat:
        w.writerow({k: (v if not isinstance(v, dict | list) else str(v)) for k, v in r.items()})


def checks_said(checks: dict[str, str], flags: Sequence[str]) -> str:
    """Which checks warned or failed, flags first: ``flag region_focus fail; note deletion warn``."""
    flagged = [f"{n} {checks[n]}" for n in flags if n in checks]
    noted = [f"{n} {o}" for n, o in checks.items() if o in ("warn", "fail") and n not in flags]
    parts = ([f"flag {', '.join(flagged)}"] if flagged else []) + ([f"note {', '.join(noted)}"] if noted else [])
    return "; ".join(parts) or "all passed"


def format_table(rows: list[dict[str, Any]]) -> str:
    if not rows:
        return "no matching entries"
    if "case_id" in rows[0] and "status" in rows[0]:
        lines = [f"{'seq':>6}  {'case':<20} {'recorded (UTC)':<20} {'model':<24} {'label':<14} {'conf':>5}  "
                 f"{'status':<7} checks that warned or failed"]
        for r in rows:
            conf = "" if r["confidence"] is None else f"{r['confidence']:.2f}"
            model = f"{r['model_name']}@{r['model_version']}"
            lines.append(f"{r['seq']:>6}  {r['case_id']:<20} {r['recorded_at']:<20} {model:<24.24} "
                         f"{r['label']:<14.14} {conf:>5}  {r['status']:<7} {checks_said(r['checks'], r['flags'])}")
        n_flagged = sum(1 for r in rows if r["flagged"])
        lines.append(f"{len(rows)} case(s), {n_flagged} flagged (sent to a person)")
        return "\n".join(lines)
    return "\n".join(f"{r['seq']:>6}  {r['kind']:<10} {r['hash'][:16]}…" for r in rows)


def amend_case(ledger: Ledger, case_id: str, *, author: str, reason: str,
               changes: dict[str, Any] | None = None, new_label: bool = False) -> Entry:
    """Record a correction to a case as a new amendment entry; the original stays as it was.

    A changed ``label`` must be one of the model's labels unless ``new_label`` (recorded as
    ``label_is_new``); every refusal comes before anything is written."""
    what = f"amendment of {case_id}"
    if not author or not author.strip():
        raise ValidationError(f"{what}: author is empty; say who makes the correction")
    if not reason or not reason.strip():
        raise ValidationError(f"{what}: reason is empty; say why the record is corrected")
    entry = ledger.case(case_id).entry
    is_new = False
    if changes and "label" in changes:
        is_new = check_label(what, str(changes["label"]), entry.body["model"]["labels"], new_label=new_label)
    elif new_label:
        raise ValidationError(f"{what}: --new-label given without a label")
    body: dict[str, Any] = {"amends_seq": entry.seq, "amends_hash": entry.hash, "case_id": case_id,
                            "author": author.strip(), "reason": reason.strip(), "amended_at": utc_now()}
    if changes:
        body["changes"] = changes
    if is_new:
        body["label_is_new"] = True
    return ledger.append("amendment", body)


def _case_history_row(b: dict[str, Any]) -> dict[str, Any]:
    checks = {c["name"]: c["outcome"] for c in b.get("checks", [])}
    return {"recorded_at": b["recorded_at"], "label": b["result"]["label"], "confidence": b["result"]["confidence"],
            "status": b["status"], "model": f"{b['model']['name']}@{b['model']['version']}",
            "checks": checks, "flagged": case_flagged(b),
            "flags": b["flags"] if isinstance(b.get("flags"), list) else flagging_checks(b.get("checks", []))}


def history(ledger: Ledger, case_id: str) -> list[dict[str, Any]]:
    """Everything recorded about one case, in ledger order: the case, its amendments, reviews, adjudications,
    replays."""
    hist = ledger.case(case_id)
    entries = [*hist.timeline(), *(ledger.get(int(r["seq"])) for r in ledger.rows("adjudications")
                                  if r["case_id"] == case_id)]
    rows = []
    for e in sorted(entries, key=lambda x: x.seq):
        row: dict[str, Any] = {"seq": e.seq, "kind": e.kind, "hash": e.hash}
        b = e.body
        if e.kind == "case":
            row.update(_case_history_row(b))
        elif e.kind == "amendment":
            row.update(amended_at=b["amended_at"], author=b["author"], reason=b["reason"],
                       changes=b.get("changes", {}), amends_seq=b["amends_seq"])
        elif e.kind == "adjudication":
            row.update({k: b.get(k) for k in ("adjudicated_at", "adjudicator", "label", "reason", "readings",
                                               "draw_id")})
        elif e.kind == "replay":
            row.update(replayed_at=b["replayed_at"], reproduces=b["reproduces"], differences=b["differences"])
        else:
            row.update({k: b.get(k) for k in ("reviewed_at", "reader", "verdict", "label", "note", "amends_seq",
                                               "draw_id")})
        if b.get("label_is_new"):
            row["label_is_new"] = True
        rows.append(row)
    return rows


def format_history(rows: list[dict[str, Any]]) -> str:
    lines = []
    for r in rows:
        new = " (a label the model does not know)" if r.get("label_is_new") else ""
        if r["kind"] == "case":
            lines.append(f"seq {r['seq']:>6}  case       {r['recorded_at']}  {r['model']}: {r['label']} "
                         f"({r['confidence']:.3f}), checks {r['status']}: {checks_said(r['checks'], r['flags'])}")
        elif r["kind"] == "amendment":
            lines.append(f"seq {r['seq']:>6}  amendment  {r['amended_at']}  by {r['author']}: {r['reason']} "
                         f"{r['changes'] or ''}".rstrip() + new)
        elif r["kind"] == "adjudication":
            lines.append(f"seq {r['seq']:>6}  adjudicated {r['adjudicated_at']}  by {r['adjudicator']}: {r['label']}"
                         f"{new} ({r['reason']}; readings {', '.join(map(str, r['readings']))})")
        elif r["kind"] == "replay":
            said = "reproduces" if r["reproduces"] else f"does not reproduce: {'; '.join(r['differences'])}"
            lines.append(f"seq {r['seq']:>6}  replay     {r['replayed_at']}  {said}")
        else:
            extra = f" label {r['label']}{new}" if r.get("label") else ""
            draw = f" for draw {r['draw_id']}" if r.get("draw_id") else ""
            fix = f", correcting seq {r['amends_seq']}" if r.get("amends_seq") else ""
            lines.append(f"seq {r['seq']:>6}  review     {r.get('reviewed_at')}  {r['reader']}: {r['verdict']}"
                         f"{extra}{draw}{fix}")
    return "\n".join(lines)
