"""The population disagreement rate behind a weighted draw (risk, stratified), never claiming more than it has.

A draw splits the population into strata h of N_h cases, n_h of them drawn (a simple random sample
without replacement, or every case: a census). Given every member's disagreement y (1/0) as read for
that draw:

- the estimate is the stratified mean sum_h (N_h / N) * k_h / n_h, which is the Horvitz-Thompson
  estimator when each member carries pi_h = n_h / N_h;
- a census stratum is known exactly; a sampled stratum's rate gets a 95 % Wilson score interval with
  continuity correction (Newcombe 1998, method 4), without the finite-population correction: both
  make it wider than needed, never narrower (the plain Wilson interval's coverage dips to about 85 %
  for rare rates in samples of 5 to 15, a continuity-corrected one stays near or above 97 %); the
  strata are joined by MOVER (Zou and Donner 2008), which keeps a stratum with 0 of n disagreements
  from shrinking the interval to a point;
- a sampled stratum (pi_h < 1) with fewer than ``minimum`` reviewed cases, including a stratum that
  drew none, is only known to lie between 0 and 1: then there is no estimate, the interval is the
  bound sum_h (N_h / N) * [low_h, high_h] with [0, 1] for that stratum, and a one-line warning says
  why.

Draws by older releases carry no stratum sizes: a risk draw's flagged stratum is its members with
pi = 1 and its other stratum holds the rest of the population; a stratified draw's N_h is n_h / pi_h,
and any cases left over form a stratum that drew none.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from casefile.review.agreement import mover_sum, wilson_cc_interval
from casefile.review.plans import DEFAULT_MINIMUM

Readings = Mapping[str, Mapping[str, Mapping[str, Any]]]  # {case_id: {reader: review body}}


@dataclass
class Stratum:
    name: str
    size: int
    drawn: int
    reviewed: int = 0
    disagreements: int = 0

    @property
    def census(self) -> bool:
        return self.drawn >= self.size

    def to_dict(self, minimum: int) -> dict[str, Any]:
        d: dict[str, Any] = {"stratum": self.name, "size": self.size, "drawn": self.drawn,
                             "inclusion_probability": (self.drawn / self.size) if self.size else 1.0,
                             "reviewed": self.reviewed, "disagreements": self.disagreements,
                             "n_of": "cases"}
        if self.census:
            d["rate"] = self.disagreements / self.reviewed if self.reviewed else None
            d["kind"] = "census"
        elif self.reviewed < minimum:
            d["rate"], d["interval_95"], d["kind"] = None, [0.0, 1.0], "too few reviewed"
        else:
            d["rate"] = self.disagreements / self.reviewed
            d["interval_95"] = list(wilson_cc_interval(self.disagreements, self.reviewed))
            d["kind"] = "sampled"
        return d


def strata_of(body: Mapping[str, Any]) -> dict[str, Stratum]:
    """The strata of a draw body (see the module docstring for draws without recorded sizes)."""
    members, n = body["members"], int(body["population_size"])
    if body.get("strata"):
        return {h: Stratum(h, int(v["size"]), int(v["drawn"])) for h, v in body["strata"].items() if v["size"]}
    if body["plan"] == "risk":
        flagged = sum(1 for m in members if m.get("stratum") == "flagged")
        out = {"flagged": Stratum("flagged", flagged, flagged)} if flagged else {}
        if n > flagged:
            out["other"] = Stratum("other", n - flagged, len(members) - flagged)
        return out
    groups: dict[str, list[Mapping[str, Any]]] = {}
    for m in members:
        groups.setdefault(str(m.get("stratum", "all")), []).append(m)
    out = {}
    for h, ms in groups.items():
        pi = float(ms[0]["inclusion_probability"])
        out[h] = Stratum(h, len(ms) if pi >= 1 else max(len(ms), round(len(ms) / pi)), len(ms))
    left = n - sum(s.size for s in out.values())
    if left > 0:
        out["not drawn"] = Stratum("not drawn", left, 0)
    return out


def population_rate(body: Mapping[str, Any], readings: Readings, disagrees: Any) -> dict[str, Any]:
    """The weighted figures of one draw from the readings recorded against it.

    ``disagrees(readers)`` says whether one case's readings count as a disagreement."""
    minimum = int(body.get("options", {}).get("minimum", DEFAULT_MINIMUM))
    strata = strata_of(body)
    by_case = {m["case_id"]: str(m.get("stratum", "all")) for m in body["members"]}
    pending = [c for c in by_case if not readings.get(c)]
    if pending:
        return {"estimate": None, "reason": f"{len(pending)} member(s) not yet reviewed for this draw"}
    for case_id, h in by_case.items():
        s = strata.setdefault(h, Stratum(h, 1, 1))
        s.reviewed += 1
        s.disagreements += 1 if disagrees(readings[case_id]) else 0
    n = int(body["population_size"])
    rows = [s.to_dict(minimum) for s in strata.values()]
    short = [r for r in rows if r["kind"] == "too few reviewed"]
    out: dict[str, Any] = {"strata": rows, "reviewed": sum(s.reviewed for s in strata.values()),
                           "n_of": "cases", "minimum": minimum}
    parts = []
    for r in rows:
        w = r["size"] / n
        if r["kind"] == "census":
            rate = r["rate"] or 0.0
            parts.append((w, rate, rate, rate))
        elif r["kind"] == "sampled":
            parts.append((w, r["rate"], *r["interval_95"]))
    if short:
        lo = sum(w * low for w, _, low, _ in parts)
        hi = sum(w * high for w, _, _, high in parts) + sum(r["size"] / n for r in short)
        names = "; ".join(f"stratum {r['stratum']!r} ({r['size']} cases, {r['reviewed']} reviewed)" for r in short)
        out.update(estimate=None, interval_95=[lo, hi], interval_method="bounds",
                   warning=(f"no point estimate: {names} has fewer than {minimum} reviewed cases, so its rate "
                            f"is only known to lie between 0 and 1; read at least {minimum} from it"))
        return out
    est, lo, hi = mover_sum(parts)
    out.update(estimate=est, interval_95=[max(0.0, lo), min(1.0, hi)],
               interval_method="stratified; Wilson with continuity correction per sampled stratum, joined by MOVER")
    return out
