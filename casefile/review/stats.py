"""Second-read statistics from the ledger: disagreement rates, agreement (kappa), lot decisions, pending.

Definitions used throughout (which reading counts where: ``casefile.review.readings``):
- a draw's figures count only the readings recorded against that draw; its members read only for other
  draws (or none) are pending for it and listed apart (``read_elsewhere``). The overall figures and
  reader agreement take each reader's latest reading of a case, for whichever draw;
- a case is reviewed when at least one reader has a current reading; it counts as a disagreement when
  any current reading is ``disagree`` (``unsure`` is counted apart and is not a disagreement);
- the reader's label is the model's label for ``agree``, the given label for ``disagree``; an
  ``unsure`` verdict, or a ``disagree`` without a label, has no reader label and stays out of the
  confusion table and of kappa;
- per draw, the disagreement rate among reviewed members comes with a 95 % Wilson score interval. For
  ``risk`` and ``stratified`` draws (and any draw whose members carry unequal inclusion probabilities)
  the population rate is estimated stratum by stratum (``casefile.review.weighted``): only once every
  member is read for the draw, and with no point estimate, only bounds and a warning, while a stratum
  drawn with probability below 1 has fewer reviewed cases than the draw's minimum;
- Cohen's kappa (Cohen 1960) compares the model's labels with the readers' (n = readings) and each
  pair of readers on the cases both read (n = cases); Fleiss' kappa (Fleiss 1971) compares three or
  more readers on the cases every one of them labelled (n = cases);
- readers disagree with each other on a case when their current labels differ (an ``adjudication``
  may then be recorded); the summary lists those cases and which are adjudicated;
- for ``lot`` draws a "defective" is a member with a disagreement; the lot is accepted when
  defectives <= Ac, rejected when defectives >= Re (ISO 2859-1), pending otherwise.
Every figure names its n and what n counts (``n_of``: cases, readings, or cases read by a pair).
These figures describe agreement between the model and readers; they do not say which is right, and
decisions rest with qualified staff under local clinical, regulatory and inspection practice.
"""

from __future__ import annotations

from collections.abc import Mapping
from itertools import combinations
from typing import Any

from casefile.cautions import AGREEMENT_CAUTION
from casefile.ledger import Ledger
from casefile.review.agreement import cohen_kappa, confusion_table, fleiss_kappa, wilson_interval
from casefile.review.calibration import reading_points, reliability
from casefile.review.lot import lot_decision
from casefile.review.readings import (
    current_readings,
    for_draw,
    latest_by_reader,
    reader_label,
    readers_disagree,
)
from casefile.review.text import describe_draw, format_text
from casefile.review.weighted import population_rate

Readers = Mapping[str, Mapping[str, Any]]  # {reader: review body} for one case

READ_RULE = ("a draw counts only the readings recorded for it; readings of its members for other draws "
             "are listed apart")


def _rate(k: int, n: int) -> dict[str, Any]:
    out: dict[str, Any] = {"disagreements": k, "reviewed": n, "n_of": "cases"}
    if n == 0:
        return {**out, "rate": None, "wilson_95": None}
    low, high = wilson_interval(k, n)
    return {**out, "rate": k / n, "wilson_95": [low, high]}


def _disagrees(readers: Readers) -> bool:
    return any(r["verdict"] == "disagree" for r in readers.values())


def summarise_draw(body: Mapping[str, Any], readings: Mapping[str, Readers],
                   elsewhere: set[str] | frozenset[str] = frozenset()) -> dict[str, Any]:
    """Statistics for one draw body from the readings recorded against it ({case_id: {reader: body}});
    ``elsewhere`` names the cases read for some other draw or none."""
    members = body["members"]
    reviewed = [m for m in members if readings.get(m["case_id"])]
    pending = [m["case_id"] for m in members if not readings.get(m["case_id"])]
    ys = [1 if _disagrees(readings[m["case_id"]]) else 0 for m in reviewed]
    unsure = sum(1 for m in reviewed if any(r["verdict"] == "unsure" for r in readings[m["case_id"]].values()))
    out: dict[str, Any] = {"draw_id": body["draw_id"], "plan": body["plan"], "members": len(members),
                           "population_size": body["population_size"], "unsure": unsure,
                           "pending": pending, "read_elsewhere": [c for c in pending if c in elsewhere],
                           **_rate(sum(ys), len(reviewed))}
    pis = {m["inclusion_probability"] for m in members}
    if body["plan"] in ("risk", "stratified") or len(pis) > 1:
        out["weighted"] = population_rate(body, readings, _disagrees)
    lot = body.get("lot")
    if lot:
        out["lot"] = {**lot, "defectives": sum(ys), "decision": lot_decision(sum(ys), len(reviewed), lot)}
    return out


def _reader_labels(current: Mapping[str, Readers], model_labels: Mapping[str, str]
                   ) -> tuple[list[tuple[str, str]], dict[str, dict[str, str]]]:
    pairs: list[tuple[str, str]] = []
    by_reader: dict[str, dict[str, str]] = {}
    for case_id, readers in current.items():
        model = model_labels.get(case_id)
        if model is None:
            continue
        for reader, review in readers.items():
            lab = reader_label(review, model)
            if lab is not None:
                pairs.append((model, lab))
                by_reader.setdefault(reader, {})[case_id] = lab
    return pairs, by_reader


def _fleiss(by_reader: Mapping[str, Mapping[str, str]]) -> dict[str, Any] | None:
    if len(by_reader) < 3:
        return None
    names = sorted(by_reader)
    common = sorted(set.intersection(*(set(by_reader[r]) for r in names)))
    out: dict[str, Any] = {"readers": names, "cases": len(common), "n_of": "cases labelled by every reader"}
    out["kappa"] = fleiss_kappa([[by_reader[r][c] for r in names] for c in common]) if common else None
    return out


def agreement(current: Mapping[str, Readers], model_labels: Mapping[str, str]) -> dict[str, Any]:
    """Model-vs-reader kappa and confusion table, Cohen's kappa per reader pair, Fleiss' for 3 or more."""
    pairs, by_reader = _reader_labels(current, model_labels)
    reader_pairs = []
    for a, b in combinations(sorted(by_reader), 2):
        both = sorted(set(by_reader[a]) & set(by_reader[b]))
        if both:
            ka = cohen_kappa([by_reader[a][c] for c in both], [by_reader[b][c] for c in both])
            reader_pairs.append({"readers": [a, b], "cases": len(both), "n_of": "cases read by both",
                                 "kappa": ka})
    return {
        "model_vs_reader": {"readings": len(pairs), "n_of": "readings",
                            "kappa": cohen_kappa([m for m, _ in pairs], [r for _, r in pairs]) if pairs else None},
        "confusion": confusion_table(pairs),
        "reader_pairs": reader_pairs,
        "fleiss": _fleiss(by_reader),
    }


def reader_conflicts(current: Mapping[str, Readers], model_labels: Mapping[str, str],
                     adjudications: list[Mapping[str, Any]]) -> dict[str, Any]:
    """Cases where readers disagree with each other, and which of them an adjudication settled."""
    cases = sorted(c for c, readers in current.items()
                   if c in model_labels and readers_disagree(readers, model_labels[c]))
    settled = {a["case_id"] for a in adjudications}
    return {"cases": cases, "adjudicated": [c for c in cases if c in settled],
            "open": [c for c in cases if c not in settled], "n_of": "cases"}


def summarise_data(draws: list[Mapping[str, Any]], reviews: list[Mapping[str, Any]],
                   model_labels: Mapping[str, str],
                   adjudications: list[Mapping[str, Any]] | None = None,
                   confidence: Mapping[str, float | None] | None = None) -> dict[str, Any]:
    """The pure part of ``summarise``: draw and review bodies in seq order (a ``seq`` key in each review,
    when present, is its entry's seq), the model label per case, adjudication bodies, and the model's
    confidence per case (for the reliability bins; left out when not given)."""
    readings = current_readings(reviews)
    current = latest_by_reader(readings)
    per_draw = []
    for d in draws:
        elsewhere = {c for (c, _, did) in readings if did != d["draw_id"]}
        per_draw.append(summarise_draw(d, for_draw(readings, d["draw_id"]), elsewhere))
    k = sum(1 for readers in current.values() if _disagrees(readers))
    warnings = [f"draw {d['draw_id']}: {d['weighted']['warning']}" for d in per_draw
                if "warning" in d.get("weighted", {})]
    return {
        "rule": READ_RULE,
        "draws": per_draw,
        "overall": {**_rate(k, len(current)), "readers": sorted({r for rs in current.values() for r in rs}),
                    "readings": sum(len(rs) for rs in current.values()), "reviews": len(reviews),
                    "note": "unweighted, over every reviewed case, each reader's latest reading"},
        "agreement": agreement(current, model_labels),
        "reader_conflicts": reader_conflicts(current, model_labels, list(adjudications or [])),
        "pending": sorted({c for d in per_draw for c in d["pending"]}),
        "warnings": warnings,
        "caution": AGREEMENT_CAUTION,
        **({"reliability": reliability(reading_points(current, confidence))} if confidence is not None else {}),
    }


def summarise(ledger: Ledger) -> dict[str, Any]:
    """Per draw and overall second-read statistics for the whole ledger, as plain JSON-ready data."""
    draws = [e.body for e in ledger.entries("draw")]
    reviews = [{**e.body, "seq": e.seq} for e in ledger.entries("review")]
    adjudications = [e.body for e in ledger.entries("adjudication")]
    rows = ledger.cases()
    labels = {row["case_id"]: row["label"] for row in rows}
    confidence = {row["case_id"]: row["confidence"] for row in rows}
    return summarise_data(draws, reviews, labels, adjudications, confidence)


__all__ = ["agreement", "describe_draw", "format_text", "reader_conflicts", "summarise", "summarise_data",
           "summarise_draw"]
