"""Second-read draws in the ledger: ``draw`` entries (samples anyone can redraw) and their redraw.

Readers' verdicts on the drawn cases are in ``casefile.review.readings``.
"""

from __future__ import annotations

import hashlib
from collections.abc import Mapping
from typing import Any

from casefile.canonical import canonical_bytes
from casefile.errors import UsageError, ValidationError
from casefile.ledger import Entry, Ledger, utc_now
from casefile.review.plans import DEFAULT_MINIMUM, PLANS, draw_plan, plan_problem

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
    if drawn["strata"] is not None:
        body["strata"] = drawn["strata"]
    if drawn["lot"] is not None:
        body["lot"] = drawn["lot"]
    return body


def _plan_kwargs(plan: str, options: Mapping[str, Any]) -> dict[str, Any]:
    keys = ("size", "aql", "level", "allocation", "strata", "share", "minimum")
    kwargs = {k: options[k] for k in keys if k in options}
    if plan == "risk" and "minimum" not in options:
        kwargs["minimum"] = None  # drawn by an older release: Bernoulli sampling by status
    return kwargs


def draw(ledger: Ledger, plan: str, *, size: int | None = None, aql: float | None = None, level: str = "II",
         seed: int = 0, filters: Mapping[str, Any] | None = None, allocation: str = "proportional",
         strata: str = "label", share: float | None = None, minimum: int = DEFAULT_MINIMUM) -> Entry:
    """Draw a sample for second reads and append it as a ``draw`` entry.

    Drawing the very same thing again (same plan, options, filters, seed and population) writes nothing
    and returns the entry already recorded, since it would be the same list of cases.
    """
    if plan not in PLANS:
        raise ValidationError(f"sampling plan {plan!r} is not one of {', '.join(PLANS)}")
    problem = plan_problem(plan, size=size, aql=aql, share=share, minimum=minimum)
    if problem:
        raise UsageError(problem)
    clean = _clean_filters(filters)
    pop = population(ledger, clean)
    kwargs: dict[str, Any] = {"size": size}
    if plan == "lot":
        kwargs = {"aql": aql, "level": level}
    elif plan == "stratified":
        kwargs.update(allocation=allocation, strata=strata)
    elif plan == "risk":
        kwargs.update(share=share, minimum=minimum)
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
        new = _body(old["plan"], pop, dict(old["filters"]), int(old["seed"]),
                    _plan_kwargs(old["plan"], old["options"]))
    except ValidationError as exc:
        return {"matches": False, "draw_id": old["draw_id"], "differences": [str(exc)]}
    fields = ("draw_id", "plan", "options", "population_size", "population_digest", "members", "strata", "lot")
    differences = [f for f in fields if new.get(f) != old.get(f)]
    return {"matches": not differences, "draw_id": old["draw_id"], "differences": differences}


__all__ = ["draw", "draw_id_for", "population", "redraw"]
