"""Agreement statistics over plain lists: Wilson interval, MOVER sums, Horvitz-Thompson, Cohen's and Fleiss' kappa."""

from __future__ import annotations

import math
from collections.abc import Sequence
from statistics import NormalDist
from typing import Any

from casefile.errors import ValidationError


def wilson_interval(k: int, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval for a binomial proportion k/n (Wilson 1927), without continuity correction.

    centre = (p + z^2 / 2n) / (1 + z^2 / n), half-width = z sqrt(p(1-p)/n + z^2 / 4n^2) / (1 + z^2 / n),
    with p = k/n and z the (1 + confidence)/2 quantile of the standard normal distribution.
    """
    if n <= 0 or not 0 <= k <= n:
        raise ValidationError(f"Wilson interval: need 0 <= k <= n and n >= 1 (got k={k}, n={n})")
    z = NormalDist().inv_cdf((1 + confidence) / 2)
    p = k / n
    denom = 1 + z * z / n
    centre = (p + z * z / (2 * n)) / denom
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / denom
    return max(0.0, centre - half), min(1.0, centre + half)


def wilson_cc_interval(k: int, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval with continuity correction (Newcombe 1998, method 4), for k/n.

    L = (2np + z^2 - 1 - z sqrt(z^2 - 2 - 1/n + 4p(n(1-p) + 1))) / (2(n + z^2)), 0 when k = 0;
    U = (2np + z^2 + 1 + z sqrt(z^2 + 2 - 1/n + 4p(n(1-p) - 1))) / (2(n + z^2)), 1 when k = n.
    Wider than the plain Wilson interval; its coverage stays at or above the nominal level where
    Wilson's dips (rare rates, small n), which is why weighted draws use it per sampled stratum.
    """
    if n <= 0 or not 0 <= k <= n:
        raise ValidationError(f"Wilson interval: need 0 <= k <= n and n >= 1 (got k={k}, n={n})")
    z = NormalDist().inv_cdf((1 + confidence) / 2)
    p = k / n
    denom = 2 * (n + z * z)
    low = 0.0 if k == 0 else (2 * n * p + z * z - 1
                              - z * math.sqrt(z * z - 2 - 1 / n + 4 * p * (n * (1 - p) + 1))) / denom
    high = 1.0 if k == n else (2 * n * p + z * z + 1
                               + z * math.sqrt(z * z + 2 - 1 / n + 4 * p * (n * (1 - p) - 1))) / denom
    return max(0.0, low), min(1.0, high)


def horvitz_thompson(ys: Sequence[float], pis: Sequence[float], population_size: int) -> dict[str, float]:
    """Horvitz-Thompson estimate of a population mean with the population size N known.

    estimate = (1/N) sum_{i in s} y_i / pi_i, unbiased for any design in which every unit has pi_i > 0.
    The variance estimate is the one for Poisson (independent Bernoulli) sampling, which is how the
    ``risk`` plan draws: var = (1/N^2) sum_{i in s} (1 - pi_i) / pi_i^2 * y_i^2 (units with pi_i = 1
    add nothing). For other designs it is an approximation.
    """
    if len(ys) != len(pis):
        raise ValidationError("Horvitz-Thompson: outcomes and inclusion probabilities differ in length")
    if population_size <= 0:
        raise ValidationError("Horvitz-Thompson: population size must be at least 1")
    for p in pis:
        if not 0 < p <= 1:
            raise ValidationError(f"Horvitz-Thompson: inclusion probability {p!r} is outside (0, 1]")
    total = sum(y / p for y, p in zip(ys, pis, strict=True))
    var = sum((1 - p) / (p * p) * y * y for y, p in zip(ys, pis, strict=True))
    estimate = total / population_size
    variance = var / population_size**2
    return {"estimate": estimate, "variance": variance, "standard_error": math.sqrt(variance)}


def cohen_kappa(a: Sequence[Any], b: Sequence[Any]) -> float | None:
    """Cohen's kappa (Cohen 1960) between two raters' labels; None when undefined (chance agreement 1).

    kappa = (p_o - p_e) / (1 - p_e), p_o the observed share of agreement, p_e = sum_c pa_c pb_c the
    agreement expected from each rater's own label frequencies.
    """
    if len(a) != len(b):
        raise ValidationError("Cohen's kappa: the two raters rated different numbers of cases")
    n = len(a)
    if n == 0:
        return None
    p_o = sum(1 for x, y in zip(a, b, strict=True) if x == y) / n
    counts_a: dict[Any, int] = {}
    counts_b: dict[Any, int] = {}
    for x, y in zip(a, b, strict=True):
        counts_a[x] = counts_a.get(x, 0) + 1
        counts_b[y] = counts_b.get(y, 0) + 1
    p_e = sum(counts_a[c] * counts_b.get(c, 0) for c in counts_a) / (n * n)
    if math.isclose(p_e, 1.0):
        return None
    return (p_o - p_e) / (1 - p_e)


def fleiss_kappa(ratings: Sequence[Sequence[Any]]) -> float | None:
    """Fleiss' kappa (Fleiss 1971) for subjects each rated by the same number m >= 2 of raters.

    ``ratings`` holds, per subject, the m labels given to it (which rater gave which does not matter).
    With n_ij the raters putting subject i in category j, N subjects:
    P_i = (sum_j n_ij^2 - m) / (m (m - 1)), P_bar = mean P_i, p_j = sum_i n_ij / (N m),
    P_e = sum_j p_j^2, kappa = (P_bar - P_e) / (1 - P_e); None when undefined (P_e = 1) or no subjects.
    """
    if not ratings:
        return None
    m = len(ratings[0])
    if m < 2 or any(len(r) != m for r in ratings):
        raise ValidationError("Fleiss' kappa: every subject needs the same number (at least 2) of ratings")
    totals: dict[Any, int] = {}
    p_bar = 0.0
    for labels in ratings:
        counts: dict[Any, int] = {}
        for lab in labels:
            counts[lab] = counts.get(lab, 0) + 1
            totals[lab] = totals.get(lab, 0) + 1
        p_bar += (sum(c * c for c in counts.values()) - m) / (m * (m - 1))
    p_bar /= len(ratings)
    p_e = sum((c / (len(ratings) * m)) ** 2 for c in totals.values())
    if math.isclose(p_e, 1.0):
        return None
    return (p_bar - p_e) / (1 - p_e)


def mover_sum(parts: Sequence[tuple[float, float, float, float]]) -> tuple[float, float, float]:
    """A confidence interval for sum_h w_h p_h from each part's (w_h, estimate, lower, upper) (MOVER).

    The method of variance estimates recovery (Zou and Donner 2008; for two proportions it is
    Newcombe's 1998 hybrid score interval): each part's own interval, here Wilson's, stands in for its
    variance on each side, L = S - sqrt(sum w_h^2 (p_h - l_h)^2), U = S + sqrt(sum w_h^2 (u_h - p_h)^2)
    for weights w_h >= 0. Returns (S, L, U); a part with l_h < p_h < u_h keeps the interval from
    collapsing to a point.
    """
    est = sum(w * p for w, p, _, _ in parts)
    down = math.sqrt(sum((w * (p - lo)) ** 2 for w, p, lo, _ in parts))
    up = math.sqrt(sum((w * (hi - p)) ** 2 for w, p, _, hi in parts))
    return est, est - down, est + up


def confusion_table(pairs: Sequence[tuple[str, str]]) -> dict[str, Any]:
    """Counts of (model label, reader label): {"labels": [...], "rows": {model: {reader: count}}}."""
    labels = sorted({x for pair in pairs for x in pair})
    rows = {m: {r: 0 for r in labels} for m in labels}
    for m, r in pairs:
        rows[m][r] += 1
    return {"labels": labels, "rows": rows}
