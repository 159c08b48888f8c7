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
   - ``risk``: two strata. Every flagged case (a check sent it to a person: the case's ``flagged``,
     see ``casefile.flags``; not merely any warn) is drawn, inclusion probability 1. From the
     ``N_u`` unflagged cases, the first ``n_u`` in key order (simple random sampling without
     replacement), inclusion probability ``n_u / N_u``, where ``n_u = ceil(share * N_u)`` or ``size``
     when a size is given instead, and never fewer than ``minimum`` (default 5) or all of them when
     there are fewer: a stratum drawn with probability below 1 always gives the statistics enough
     cases to bound its rate. The body records each stratum's size and how many were drawn.
     Draws recorded by older releases (no ``minimum`` in their options) were Bernoulli draws: every
     case with status ``warn``/``fail`` with probability 1, every other case when ``u_i < p``
     (``p = share``, or ``min(1, size / N_other)``); ``redraw`` still follows that rule for them;
   - ``lot``: the whole population is the lot; ISO 2859-1 gives the sample size ``n`` (see
     ``casefile.review.lot``); the first ``n`` cases in key order, or all of them when ``n >= N``.
4. Members are listed in ascending ``seq`` order.
"""

from __future__ import annotations

import heapq
import math
import random
from collections.abc import Iterable, Mapping
from typing import Any, Literal

from casefile.errors import ValidationError
from casefile.review.lot import LEVELS, single_normal_plan

Plan = Literal["random", "stratified", "risk", "lot"]
PLANS = ("random", "stratified", "risk", "lot")
ALLOCATIONS = ("proportional", "equal")
STRATA = ("label", "status", "label+status", "flagged")
LEGACY_FLAGGED = ("warn", "fail")  # how draws by older releases chose their census stratum
DEFAULT_MINIMUM = 5
DEFAULT_SHARE = 0.1


def plan_problem(plan: str, *, size: int | None = None, aql: float | None = None, share: float | None = None,
                 minimum: int = DEFAULT_MINIMUM) -> str | None:
    """Why these options do not make a draw of ``plan`` (named as the command line names them), or None.
    An option that goes with another plan is refused rather than ignored."""
    if plan in ("random", "stratified") and size is None:
        return f"--plan {plan} needs --size N"
    if plan == "lot" and aql is None:
        return "--plan lot needs --aql A (the acceptable quality limit in %)"
    if plan == "risk" and size is None and share is None:
        return "--plan risk needs --size N or --share P (the share of unflagged cases to draw)"
    if plan != "lot" and aql is not None:
        return f"--aql goes with --plan lot, not --plan {plan}"
    if plan == "lot" and size is not None:
        return "--plan lot takes its sample size from ISO 2859-1 (--aql, --level); leave out --size"
    if plan != "risk" and minimum != DEFAULT_MINIMUM:
        return f"--minimum goes with --plan risk, not --plan {plan}"
    if plan != "risk" and share is not None:
        return f"--share goes with --plan risk, not --plan {plan}"
    return None


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
    if by == "flagged":
        return "flagged" if is_flagged(row) else "unflagged"
    return f"{row['label']}|{row['status']}"


def is_flagged(row: Mapping[str, Any]) -> bool:
    """Whether a population row (a ``cases`` query-table row) was sent to a person by a flag."""
    if "flagged" not in row:
        raise ValidationError(f"case {row.get('case_id', '?')}: the population row has no 'flagged' field")
    return bool(row["flagged"])


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
                by: str) -> tuple[list[dict[str, Any]], dict[str, dict[str, int]]]:
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
    return members, {h: {"size": sizes[h], "drawn": alloc[h]} for h in sorted(sizes)}


def _check_share(share: float) -> float:
    if isinstance(share, bool) or not isinstance(share, int | float) or not 0 < share <= 1:
        raise ValidationError(f"risk plan: share must be a number in (0, 1] (got {share!r})")
    return float(share)


def risk_share(pop: list[Mapping[str, Any]], size: int | None, share: float | None) -> float:
    """Older releases' Bernoulli probability for unflagged cases: ``share``, else ``size / N_other``, else 0.1."""
    if share is not None:
        return _check_share(share)
    if size is not None:
        rest = sum(1 for row in pop if row["status"] not in LEGACY_FLAGGED)
        return 1.0 if rest == 0 else min(1.0, _check_size("risk", size) / rest)
    return DEFAULT_SHARE


def _legacy_risk(pop: list[Mapping[str, Any]], keys: list[float], p: float) -> list[dict[str, Any]]:
    members = []
    for i, row in enumerate(pop):
        if row["status"] in LEGACY_FLAGGED:
            members.append(_member(row, 1.0, "flagged"))
        elif keys[i] < p:
            members.append(_member(row, p, "other"))
    return members


def unflagged_quota(n_unflagged: int, size: int | None, share: float | None, minimum: int) -> int:
    """How many unflagged cases the risk plan draws: ``size``, else ``ceil(share * N_u)``, at least
    ``minimum``, at most all of them."""
    if isinstance(minimum, bool) or not isinstance(minimum, int) or minimum < 1:
        raise ValidationError(f"risk plan: minimum must be a whole number of at least 1 (got {minimum!r})")
    if share is not None:
        wanted = math.ceil(_check_share(share) * n_unflagged - 1e-9)
    elif size is not None:
        wanted = _check_size("risk", size)
    else:
        wanted = math.ceil(DEFAULT_SHARE * n_unflagged - 1e-9)
    return min(n_unflagged, max(minimum, wanted))


def _risk(pop: list[Mapping[str, Any]], keys: list[float], size: int | None, share: float | None,
          minimum: int) -> tuple[list[dict[str, Any]], dict[str, dict[str, int]]]:
    flagged = [i for i, row in enumerate(pop) if is_flagged(row)]
    rest = [i for i, row in enumerate(pop) if not is_flagged(row)]
    n_u = unflagged_quota(len(rest), size, share, minimum)
    members = [_member(pop[i], 1.0, "flagged") for i in flagged]
    if n_u:
        sub = [pop[i] for i in rest]
        p = n_u / len(rest)
        members += [_member(sub[j], p, "unflagged") for j in _order(sub, [keys[i] for i in rest], n_u)]
    return members, {"flagged": {"size": len(flagged), "drawn": len(flagged)},
                     "unflagged": {"size": len(rest), "drawn": n_u}}


def draw_plan(plan: str, population: Iterable[Mapping[str, Any]], *, seed: int = 0, size: int | None = None,
              aql: float | None = None, level: str = "II", allocation: str = "proportional",
              strata: str = "label", share: float | None = None,
              minimum: int | None = DEFAULT_MINIMUM) -> dict[str, Any]:
    """Draw a sample; return plain data: plan, seed, options, population_size, members, strata, lot.

    ``minimum`` (risk plan) of None redraws the way older releases drew (Bernoulli, by status)."""
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
    sizes: dict[str, dict[str, int]] | None = None
    if plan == "random":
        members = _random(pop, keys, size)
        options["size"] = size
    elif plan == "stratified":
        members, sizes = _stratified(pop, _order(pop, keys), size, allocation, strata)
        options.update(size=size, allocation=allocation, strata=strata)
    elif plan == "risk" and minimum is None:
        p = risk_share(pop, size, share)
        members = _legacy_risk(pop, keys, p)
        options["share"] = p
        if size is not None and share is None:
            options["size"] = size
    elif plan == "risk":
        members, sizes = _risk(pop, keys, size, share, minimum)
        options["minimum"] = minimum
        if share is not None or size is None:
            options["share"] = DEFAULT_SHARE if share is None else float(share)
        else:
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
            "members": members, "strata": sizes, "lot": lot}
