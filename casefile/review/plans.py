"""Sampling plans for second reads over plain population rows, deterministic from a seed.

The exact algorithm, so that anyone can redraw a sample by hand or in another language:

1. The population is the list of case rows matching the draw's filters, sorted by ledger ``seq``.
2. ``rng = random.Random(seed)`` (Python's Mersenne Twister seeded with a non-negative integer) gives
   one key ``u_i = rng.random()`` per case, in ascending ``seq`` order. Only ``random()`` is used,
   because Python guarantees its sequence for a given seed across versions.
3. Ordering cases by ``(u_i, seq)`` is a uniformly random permutation; the plans use it as follows:
   - ``random``: the first ``n = min(size, N)`` cases; inclusion probability ``n / N`` each
     (simple random sampling without replacement);
   - ``stratified``: strata by ``label``, ``status`` or ``label+status``; in each stratum ``h`` the first
     ``n_h`` cases of that stratum in key order; inclusion probability ``n_h / N_h``. Allocation:
       * ``proportional``: quota ``n * N_h / N``, floored; the units still missing go one each to the
         strata with the largest fractional parts (ties: stratum name in sorted order) -- the largest
         remainder method;
       * ``equal``: ``n // H`` each, the remainder one each to strata in sorted name order; a stratum
         never takes more than ``N_h``; what it cannot take is handed on, one unit at a time, to the
         other strata with room, in sorted name order;
   - ``risk``: every flagged case (status ``warn`` or ``fail``) with probability 1; every other case
     independently when ``u_i < p`` (Bernoulli sampling with probability ``p = share``), so each
     member carries inclusion probability ``p`` and Horvitz-Thompson weights stay unbiased. When a
     ``size`` is given instead of a share, ``p = min(1, size / N_unflagged)``;
   - ``lot``: the whole population is the lot; ISO 2859-1 gives the sample size ``n`` (see
     ``casefile.review.lot``); the first ``n`` cases in key order, or all of them when ``n >= N``.
4. Members are listed in ascending ``seq`` order.
"""

from __future__ import annotations

import heapq
import random
from collections.abc import Iterable, Mapping
from typing import Any

from casefile.errors import ValidationError
from casefile.review.lot import LEVELS, single_normal_plan

PLANS = ("random", "stratified", "risk", "lot")
ALLOCATIONS = ("proportional", "equal")
STRATA = ("label", "status", "label+status")
FLAGGED = ("warn", "fail")


def _keys(population: list[Mapping[str, Any]], seed: int) -> list[float]:
    rng = random.Random(seed)
    return [rng.random() for _ in population]


def _order(population: list[Mapping[str, Any]], keys: list[float], first: int | None = None) -> list[int]:
    """Indices in (key, seq) order; only the ``first`` ones when given (same result, less work)."""
    def by_key(i: int) -> tuple[float, int]:
        return keys[i], int(population[i]["seq"])
    if first is not None and first < len(population):
        return heapq.nsmallest(first, range(len(population)), key=by_key)
    return sorted(range(len(population)), key=by_key)


def _member(row: Mapping[str, Any], p: float, stratum: str | None = None) -> dict[str, Any]:
    m: dict[str, Any] = {"case_id": row["case_id"], "seq": int(row["seq"]), "inclusion_probability": p}
    if stratum is not None:
        m["stratum"] = stratum
    return m


def _stratum_of(row: Mapping[str, Any], by: str) -> str:
    if by == "label":
        return str(row["label"])
    if by == "status":
        return str(row["status"])
    return f"{row['label']}|{row['status']}"


def largest_remainder(n: int, sizes: Mapping[str, int]) -> dict[str, int]:
    """Proportional allocation of ``n`` units over strata by the largest remainder method."""
    total = sum(sizes.values())
    if total == 0:
        return {h: 0 for h in sizes}
    names = sorted(sizes)
    quota = {h: n * sizes[h] / total for h in names}
    alloc = {h: int(quota[h]) for h in names}
    missing = n - sum(alloc.values())
    by_remainder = sorted(names, key=lambda h: (-(quota[h] - alloc[h]), h))
    for h in by_remainder[:missing]:
        alloc[h] += 1
    return alloc


def equal_allocation(n: int, sizes: Mapping[str, int]) -> dict[str, int]:
    """Equal allocation of ``n`` units, capped at each stratum's size, overflow handed on in name order."""
    names = sorted(sizes)
    n = min(n, sum(sizes.values()))
    alloc = {h: 0 for h in names}
    left = n
    while left > 0:
        open_strata = [h for h in names if alloc[h] < sizes[h]]
        share, extra = divmod(left, len(open_strata))
        for i, h in enumerate(open_strata):
            give = min(share + (1 if i < extra else 0), sizes[h] - alloc[h])
            alloc[h] += give
            left -= give
    return alloc


def _check_size(plan: str, size: int | None) -> int:
    if size is None or isinstance(size, bool) or not isinstance(size, int) or size < 1:
        raise ValidationError(f"{plan} plan: size must be a whole number of at least 1 (got {size!r})")
    return size


def _random(pop: list[Mapping[str, Any]], keys: list[float], size: int | None) -> list[dict[str, Any]]:
    n = min(_check_size("random", size), len(pop))
    p = n / len(pop)
    return [_member(pop[i], p) for i in _order(pop, keys, n)]


def _stratified(pop: list[Mapping[str, Any]], order: list[int], size: int | None, allocation: str,
                by: str) -> list[dict[str, Any]]:
    n = min(_check_size("stratified", size), len(pop))
    if allocation not in ALLOCATIONS:
        raise ValidationError(f"stratified plan: allocation {allocation!r} is not one of {', '.join(ALLOCATIONS)}")
    if by not in STRATA:
        raise ValidationError(f"stratified plan: strata {by!r} is not one of {', '.join(STRATA)}")
    names = [_stratum_of(row, by) for row in pop]
    sizes: dict[str, int] = {}
    for h in names:
        sizes[h] = sizes.get(h, 0) + 1
    alloc = largest_remainder(n, sizes) if allocation == "proportional" else equal_allocation(n, sizes)
    taken = {h: 0 for h in sizes}
    members = []
    for i in order:
        h = names[i]
        if taken[h] < alloc[h]:
            taken[h] += 1
            members.append(_member(pop[i], alloc[h] / sizes[h], h))
    return members


def risk_share(pop: list[Mapping[str, Any]], size: int | None, share: float | None) -> float:
    """The Bernoulli probability for unflagged cases: ``share``, else ``size / N_unflagged``, else 0.1."""
    if share is not None:
        if isinstance(share, bool) or not isinstance(share, int | float) or not 0 < share <= 1:
            raise ValidationError(f"risk plan: share must be a number in (0, 1] (got {share!r})")
        return float(share)
    if size is not None:
        rest = sum(1 for row in pop if row["status"] not in FLAGGED)
        return 1.0 if rest == 0 else min(1.0, _check_size("risk", size) / rest)
    return 0.1


def _risk(pop: list[Mapping[str, Any]], keys: list[float], p: float) -> list[dict[str, Any]]:
    members = []
    for i, row in enumerate(pop):
        if row["status"] in FLAGGED:
            members.append(_member(row, 1.0, "flagged"))
        elif keys[i] < p:
            members.append(_member(row, p, "other"))
    return members


def draw_plan(plan: str, population: Iterable[Mapping[str, Any]], *, seed: int = 0, size: int | None = None,
              aql: float | None = None, level: str = "II", allocation: str = "proportional",
              strata: str = "label", share: float | None = None) -> dict[str, Any]:
    """Draw a sample; return plain data: plan, seed, options, population_size, members, lot."""
    if plan not in PLANS:
        raise ValidationError(f"sampling plan {plan!r} is not one of {', '.join(PLANS)}")
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise ValidationError(f"{plan} plan: seed must be a non-negative whole number (got {seed!r})")
    pop = sorted(population, key=lambda row: int(row["seq"]))
    seqs = [int(row["seq"]) for row in pop]
    if len(set(seqs)) != len(seqs):
        raise ValidationError(f"{plan} plan: the population lists a case seq more than once")
    if not pop:
        raise ValidationError(f"{plan} plan: no cases match the filters, nothing to draw")
    keys = _keys(pop, seed)
    options: dict[str, Any] = {}
    lot = None
    if plan == "random":
        members = _random(pop, keys, size)
        options["size"] = size
    elif plan == "stratified":
        members = _stratified(pop, _order(pop, keys), size, allocation, strata)
        options.update(size=size, allocation=allocation, strata=strata)
    elif plan == "risk":
        p = risk_share(pop, size, share)
        members = _risk(pop, keys, p)
        options["share"] = p
        if size is not None and share is None:
            options["size"] = size
    else:
        if aql is None:
            raise ValidationError("lot plan: an AQL is needed (e.g. aql=1.0)")
        if level not in LEVELS:
            raise ValidationError(f"lot plan: inspection level {level!r} is not one of I, II, III")
        lot = single_normal_plan(len(pop), aql, level)
        n = lot["sample_size"]
        p = n / len(pop)
        members = [_member(pop[i], p) for i in _order(pop, keys, n)]
        options.update(aql=lot["aql"], level=level)
    members.sort(key=lambda m: m["seq"])
    return {"plan": plan, "seed": seed, "options": options, "population_size": len(pop),
            "members": members, "lot": lot}
