"""Second-read statistics from the ledger: disagreement rates, agreement (kappa), lot decisions, pending.

Definitions used throughout:
- a reader's current verdict on a case is their latest review of it;
- a case is reviewed when at least one reader has a current verdict; it counts as a disagreement when
  any current verdict is ``disagree`` (``unsure`` is counted apart and is not a disagreement);
- the reader's label is the model's label for ``agree``, the given label for ``disagree``; an
  ``unsure`` verdict, or a ``disagree`` without a label, has no reader label and stays out of the
  confusion table and of kappa;
- per draw, the disagreement rate among reviewed members comes with a 95 % Wilson score interval. For
  ``risk`` and ``stratified`` draws (and any draw whose members carry unequal inclusion probabilities) the
  population rate is estimated by Horvitz-Thompson with N known: (1/N) sum y_i / pi_i, with the
  Poisson-sampling variance (1/N^2) sum (1 - pi_i) / pi_i^2 y_i^2 and a normal 95 % interval
  (estimate +- 1.96 SE, clipped to [0, 1]). It is given only once every member is reviewed, because
  unread members would bias it; until then it is null with the reason. Strata that drew no member are
  not represented by the estimate;
- for ``lot`` draws a "defective" is a member with a disagreement; the lot is accepted when
  defectives <= Ac, rejected when defectives >= Re (ISO 2859-1), pending otherwise.
These figures describe agreement between the model and readers; they do not say which is right, and
decisions rest with qualified staff under local clinical, regulatory and inspection practice.
"""

from __future__ import annotations

from collections.abc import Mapping
from itertools import combinations
from typing import Any

from casefile.cautions import AGREEMENT_CAUTION
from casefile.ledger import Ledger
from casefile.review.agreement import cohen_kappa, confusion_table, horvitz_thompson, wilson_interval
from casefile.review.lot import lot_decision
from casefile.review.store import current_reviews

Z95 = 1.959963984540054  # standard normal 0.975 quantile


def reader_label(review: Mapping[str, Any], model_label: str) -> str | None:
    """The label a reader gave (see the module docstring); None when unknown."""
    if review["verdict"] == "agree":
        return model_label
    if review["verdict"] == "disagree":
        return review.get("label")
    return None


def _rate(k: int, n: int) -> dict[str, Any]:
    if n == 0:
        return {"disagreements": k, "reviewed": n, "rate": None, "wilson_95": None}
    low, high = wilson_interval(k, n)
    return {"disagreements": k, "reviewed": n, "rate": k / n, "wilson_95": [low, high]}


def _disagrees(readers: Mapping[str, Mapping[str, Any]]) -> bool:
    return any(r["verdict"] == "disagree" for r in readers.values())


def summarise_draw(body: Mapping[str, Any], current: Mapping[str, Mapping[str, Any]]) -> dict[str, Any]:
    """Statistics for one draw body, given current reviews {case_id: {reader: review body}}."""
    members = body["members"]
    reviewed = [m for m in members if current.get(m["case_id"])]
    pending = [m["case_id"] for m in members if not current.get(m["case_id"])]
    ys = [1 if _disagrees(current[m["case_id"]]) else 0 for m in reviewed]
    unsure = sum(1 for m in reviewed if any(r["verdict"] == "unsure" for r in current[m["case_id"]].values()))
    out: dict[str, Any] = {"draw_id": body["draw_id"], "plan": body["plan"], "members": len(members),
                           "population_size": body["population_size"], "unsure": unsure,
                           "pending": pending, **_rate(sum(ys), len(reviewed))}
    pis = {m["inclusion_probability"] for m in members}
    if body["plan"] in ("risk", "stratified") or len(pis) > 1:
        if pending:
            out["weighted"] = {"estimate": None, "reason": f"{len(pending)} member(s) not yet reviewed"}
        else:
            ht = horvitz_thompson(ys, [m["inclusion_probability"] for m in reviewed], body["population_size"])
            half = Z95 * ht["standard_error"]
            ht["interval_95"] = [max(0.0, ht["estimate"] - half), min(1.0, ht["estimate"] + half)]
            ht["method"] = "Horvitz-Thompson, N known; Poisson-sampling variance"
            out["weighted"] = ht
    lot = body.get("lot")
    if lot:
        out["lot"] = {**lot, "defectives": sum(ys), "decision": lot_decision(sum(ys), len(reviewed), lot)}
    return out


def agreement(current: Mapping[str, Mapping[str, Any]], model_labels: Mapping[str, str]) -> dict[str, Any]:
    """Model-vs-reader kappa and confusion table, and kappa for every pair of readers."""
    pairs: list[tuple[str, str]] = []
    labels_by_reader: dict[str, dict[str, str]] = {}
    for case_id, readers in current.items():
        model = model_labels.get(case_id)
        if model is None:
            continue
        for reader, review in readers.items():
            lab = reader_label(review, model)
            if lab is not None:
                pairs.append((model, lab))
                labels_by_reader.setdefault(reader, {})[case_id] = lab
    reader_pairs = []
    for a, b in combinations(sorted(labels_by_reader), 2):
        both = sorted(set(labels_by_reader[a]) & set(labels_by_reader[b]))
        if both:
            ka = cohen_kappa([labels_by_reader[a][c] for c in both], [labels_by_reader[b][c] for c in both])
            reader_pairs.append({"readers": [a, b], "cases": len(both), "kappa": ka})
    return {
        "model_vs_reader": {"pairs": len(pairs),
                            "kappa": cohen_kappa([m for m, _ in pairs], [r for _, r in pairs]) if pairs else None},
        "confusion": confusion_table(pairs),
        "reader_pairs": reader_pairs,
    }


def summarise_data(draws: list[Mapping[str, Any]], reviews: list[Mapping[str, Any]],
                   model_labels: Mapping[str, str]) -> dict[str, Any]:
    """The pure part of ``summarise``: draw bodies and review bodies in seq order, model label per case."""
    current = current_reviews(list(reviews))
    per_draw = [summarise_draw(d, current) for d in draws]
    k = sum(1 for readers in current.values() if _disagrees(readers))
    pending = sorted({c for d in per_draw for c in d["pending"]})
    readers = sorted({r for readers in current.values() for r in readers})
    return {
        "draws": per_draw,
        "overall": {**_rate(k, len(current)), "readers": readers, "reviews": len(reviews),
                    "note": "unweighted, over every reviewed case"},
        "agreement": agreement(current, model_labels),
        "pending": pending,
        "caution": AGREEMENT_CAUTION,
    }


def summarise(ledger: Ledger) -> dict[str, Any]:
    """Per draw and overall second-read statistics for the whole ledger, as plain JSON-ready data."""
    draws = [e.body for e in ledger.entries("draw")]
    reviews = [e.body for e in ledger.entries("review")]
    labels = {row["case_id"]: row["label"] for row in ledger.cases()}
    return summarise_data(draws, reviews, labels)


def _pct(x: float | None) -> str:
    return "n/a" if x is None else f"{100 * x:.1f} %"


def _rate_line(r: Mapping[str, Any]) -> str:
    if r["rate"] is None:
        return "no reviews yet"
    low, high = r["wilson_95"]
    return (f"{r['disagreements']} of {r['reviewed']} reviewed disagree: {_pct(r['rate'])} "
            f"(95 % Wilson {_pct(low)} to {_pct(high)})")


def format_text(summary: Mapping[str, Any]) -> str:
    """Human-readable lines for the ``stats`` command."""
    lines = ["Second reads", "", f"Overall: {_rate_line(summary['overall'])}",
             f"Readers: {', '.join(summary['overall']['readers']) or 'none'}"]
    mv = summary["agreement"]["model_vs_reader"]
    kappa = "n/a" if mv["kappa"] is None else f"{mv['kappa']:.3f}"
    lines.append(f"Cohen's kappa, model vs reader labels: {kappa} over {mv['pairs']} reading(s)")
    for p in summary["agreement"]["reader_pairs"]:
        kp = "n/a" if p["kappa"] is None else f"{p['kappa']:.3f}"
        lines.append(f"Cohen's kappa, {p['readers'][0]} vs {p['readers'][1]}: {kp} over {p['cases']} case(s)")
    conf = summary["agreement"]["confusion"]
    if conf["labels"]:
        width = max(len(x) for x in [*conf["labels"], "model \\ reader"]) + 2
        lines += ["", "Model label (rows) by reader label (columns):",
                  "model \\ reader".ljust(width) + "".join(x.rjust(width) for x in conf["labels"])]
        for m in conf["labels"]:
            lines.append(m.ljust(width) + "".join(str(conf["rows"][m][r]).rjust(width) for r in conf["labels"]))
    for d in summary["draws"]:
        lines += ["", f"Draw {d['draw_id']} ({d['plan']}): {d['members']} of {d['population_size']} cases",
                  f"  {_rate_line(d)}"]
        w = d.get("weighted")
        if w is not None:
            if w.get("estimate") is None:
                lines.append(f"  weighted estimate: not yet ({w['reason']})")
            else:
                lo, hi = w["interval_95"]
                lines.append(f"  weighted estimate for the population: {_pct(w['estimate'])} "
                             f"(95 % {_pct(lo)} to {_pct(hi)}, Horvitz-Thompson)")
        if "lot" in d:
            lot = d["lot"]
            lines.append(f"  lot: code letter {lot['code_letter']}, n={lot['sample_size']}, AQL {lot['aql']:g}, "
                         f"Ac {lot['accept']} Re {lot['reject']}; defectives {lot['defectives']}: {lot['decision']}")
        if d["pending"]:
            lines.append(f"  awaiting review: {len(d['pending'])} ({', '.join(d['pending'][:10])}"
                         f"{', ...' if len(d['pending']) > 10 else ''})")
    lines += ["", summary["caution"]]
    return "\n".join(lines)


def describe_draw(body: Mapping[str, Any]) -> str:
    """Human-readable lines for the ``sample`` command: what was drawn and how to redraw it."""
    opts = ", ".join(f"{k}={v}" for k, v in sorted(body["options"].items())) or "none"
    filters = ", ".join(f"{k}={v}" for k, v in sorted(body["filters"].items())) or "none (every case)"
    lines = [f"Draw {body['draw_id']} ({body['plan']} plan, seed {body['seed']}, options {opts})",
             f"Filters: {filters}; population {body['population_size']} case(s); "
             f"{len(body['members'])} drawn"]
    lot = body.get("lot")
    if lot:
        full = " (every case: sample size reaches the lot size)" if lot["full_inspection"] else ""
        lines.append(f"ISO 2859-1 level {lot['level']}: code letter {lot['code_letter']}, plan row "
                     f"{lot['plan_letter']}, n={lot['sample_size']}{full}, AQL {lot['aql']:g}, "
                     f"accept with at most {lot['accept']} disagreement(s), reject at {lot['reject']}")
    for m in body["members"]:
        stratum = f"  [{m['stratum']}]" if "stratum" in m else ""
        lines.append(f"  {m['case_id']}  seq {m['seq']}  p={m['inclusion_probability']:.4g}{stratum}")
    return "\n".join(lines)
