"""Second reads in the ledger: draw entries (samples anyone can redraw) and reader review entries.

Rules for a review (decided here and kept by ``record_review``):
- the case id must name a recorded case; the reader id must not be blank; the verdict is one of
  ``agree``, ``disagree``, ``unsure``;
- ``label`` (the reader's own label) is optional. With ``agree`` it must equal the model's label when
  given; with ``disagree`` it must differ from it. A ``disagree`` without a label still counts as a
  disagreement but cannot enter the confusion table or kappa;
- several readers may review one case; a reader's later review of the same case amends the earlier one:
  ``amends_seq`` names the seq it replaces (filled in automatically with the reader's latest review
  when not given) and both stay visible. A reader may only amend their own review of the same case;
- the reader's current verdict is their latest review;
- ``draw_id``, when not given, is the latest draw that has the case among its members, if any.
"""

from __future__ import annotations

import hashlib
from collections.abc import Mapping
from typing import Any

from casefile.canonical import canonical_bytes
from casefile.errors import LedgerError, ValidationError
from casefile.ledger import Entry, Ledger, utc_now
from casefile.review.plans import PLANS, draw_plan

VERDICTS = ("agree", "disagree", "unsure")
FILTER_KEYS = ("model", "label", "status", "since", "until")


def _clean_filters(filters: Mapping[str, Any] | None) -> dict[str, str]:
    out: dict[str, str] = {}
    for key, value in (filters or {}).items():
        if key not in FILTER_KEYS:
            raise ValidationError(f"draw: unknown filter {key!r}; use {', '.join(FILTER_KEYS)}")
        if value is not None and value != "":
            out[key] = str(value)
    return out


def population(ledger: Ledger, filters: Mapping[str, Any] | None = None,
               before_seq: int | None = None) -> list[dict[str, Any]]:
    """Case rows matching ``filters`` (model, label, status, since, until), only seq < ``before_seq``."""
    rows = ledger.cases(**_clean_filters(filters))
    if before_seq is not None:
        rows = [r for r in rows if int(r["seq"]) < before_seq]
    return sorted(rows, key=lambda r: int(r["seq"]))


def draw_id_for(plan: str, filters: Mapping[str, Any], seed: int, options: Mapping[str, Any],
                seqs: list[int]) -> str:
    """"d-" + the first 12 hex of SHA-256 over canonical JSON of plan, filters, seed, options, seqs."""
    data = {"plan": plan, "filters": dict(filters), "seed": seed, "options": dict(options), "population": seqs}
    return "d-" + hashlib.sha256(canonical_bytes(data)).hexdigest()[:12]


def _body(plan: str, pop: list[dict[str, Any]], filters: dict[str, str], seed: int,
          kwargs: dict[str, Any]) -> dict[str, Any]:
    drawn = draw_plan(plan, pop, seed=seed, **kwargs)
    seqs = [int(r["seq"]) for r in pop]
    body: dict[str, Any] = {
        "draw_id": draw_id_for(plan, filters, seed, drawn["options"], seqs),
        "plan": plan,
        "filters": filters,
        "seed": seed,
        "options": drawn["options"],
        "population_size": drawn["population_size"],
        "population_digest": hashlib.sha256(canonical_bytes(seqs)).hexdigest(),
        "members": drawn["members"],
    }
    if drawn["lot"] is not None:
        body["lot"] = drawn["lot"]
    return body


def _plan_kwargs(options: Mapping[str, Any]) -> dict[str, Any]:
    keys = ("size", "aql", "level", "allocation", "strata", "share")
    return {k: options[k] for k in keys if k in options}


def draw(ledger: Ledger, plan: str, *, size: int | None = None, aql: float | None = None, level: str = "II",
         seed: int = 0, filters: Mapping[str, Any] | None = None, allocation: str = "proportional",
         strata: str = "label", share: float | None = None) -> Entry:
    """Draw a sample for second reads and append it as a ``draw`` entry.

    Drawing the very same thing again (same plan, options, filters, seed and population) writes nothing
    and returns the entry already recorded, since it would be the same list of cases.
    """
    if plan not in PLANS:
        raise ValidationError(f"sampling plan {plan!r} is not one of {', '.join(PLANS)}")
    clean = _clean_filters(filters)
    pop = population(ledger, clean)
    kwargs: dict[str, Any] = {"size": size}
    if plan == "lot":
        kwargs = {"aql": aql, "level": level}
    elif plan == "stratified":
        kwargs.update(allocation=allocation, strata=strata)
    elif plan == "risk":
        kwargs["share"] = share
    body = _body(plan, pop, clean, seed, kwargs)
    for row in ledger.rows("draws"):
        if row["draw_id"] == body["draw_id"]:
            return ledger.get(int(row["seq"]))
    body["drawn_at"] = utc_now()
    return ledger.append("draw", body)


def redraw(ledger: Ledger, draw_entry: Entry) -> dict[str, Any]:
    """Recompute a recorded draw from its filters and seed over the population as of that draw.

    Returns {"matches": bool, "draw_id", "differences": [field names that differ]}.
    """
    if draw_entry.kind != "draw":
        raise ValidationError(f"seq {draw_entry.seq}: entry is a {draw_entry.kind!r}, not a draw")
    old = draw_entry.body
    pop = population(ledger, old["filters"], before_seq=draw_entry.seq)
    try:
        new = _body(old["plan"], pop, dict(old["filters"]), int(old["seed"]), _plan_kwargs(old["options"]))
    except ValidationError as exc:
        return {"matches": False, "draw_id": old["draw_id"], "differences": [str(exc)]}
    fields = ("draw_id", "plan", "options", "population_size", "population_digest", "members", "lot")
    differences = [f for f in fields if new.get(f) != old.get(f)]
    return {"matches": not differences, "draw_id": old["draw_id"], "differences": differences}


def _latest_draw_with(ledger: Ledger, case_id: str) -> str | None:
    found = None
    for e in ledger.entries("draw"):
        if any(m["case_id"] == case_id for m in e.body["members"]):
            found = e.body["draw_id"]
    return found


def record_review(ledger: Ledger, case_id: str, *, reader: str, verdict: str, label: str | None = None,
                  note: str | None = None, amends: int | None = None, draw_id: str | None = None) -> Entry:
    """Append a reader's verdict on a case as a ``review`` entry (rules in this module's docstring)."""
    if not isinstance(reader, str) or not reader.strip():
        raise ValidationError(f"review of {case_id}: reader id is empty; give who read the case")
    reader = reader.strip()
    if verdict not in VERDICTS:
        raise ValidationError(f"review of {case_id}: verdict {verdict!r} is not one of {', '.join(VERDICTS)}")
    try:
        history = ledger.case(case_id)
    except LedgerError:
        raise ValidationError(f"review of {case_id}: no case with this id in the ledger") from None
    model_label = history.entry.body["result"]["label"]
    if label is not None:
        label = label.strip()
        if not label:
            raise ValidationError(f"review of {case_id}: label is blank; leave it out or give the reader's label")
        if verdict == "agree" and label != model_label:
            raise ValidationError(f"review of {case_id}: verdict agree but label {label!r} differs from the "
                                  f"model's {model_label!r}; use disagree")
        if verdict == "disagree" and label == model_label:
            raise ValidationError(f"review of {case_id}: verdict disagree but label {label!r} is the model's own")
    own = [r for r in history.reviews if r.body["reader"] == reader]
    if amends is not None:
        target = next((r for r in history.reviews if r.seq == amends), None)
        if target is None:
            raise ValidationError(f"review of {case_id}: seq {amends} is not a review of this case")
        if target.body["reader"] != reader:
            raise ValidationError(f"review of {case_id}: seq {amends} is {target.body['reader']!r}'s review; "
                                  "a reader may only amend their own")
    elif own:
        amends = own[-1].seq
    body: dict[str, Any] = {"case_id": case_id, "case_seq": history.entry.seq, "reader": reader,
                            "verdict": verdict, "reviewed_at": utc_now()}
    if label is not None:
        body["label"] = label
    if note is not None:
        body["note"] = note
    if amends is not None:
        body["amends_seq"] = amends
    draw_id = draw_id or _latest_draw_with(ledger, case_id)
    if draw_id is not None:
        body["draw_id"] = draw_id
    return ledger.append("review", body)


def current_reviews(reviews: list[Mapping[str, Any]]) -> dict[str, dict[str, dict[str, Any]]]:
    """Latest review per (case, reader) from review bodies given in seq order: {case_id: {reader: body}}."""
    out: dict[str, dict[str, dict[str, Any]]] = {}
    for body in reviews:
        out.setdefault(body["case_id"], {})[body["reader"]] = dict(body)
    return out


__all__ = ["VERDICTS", "current_reviews", "draw", "draw_id_for", "population", "record_review",
           "redraw"]
