"""Agreement statistics over plain lists: Wilson interval, Horvitz-Thompson estimate, Cohen's kappa."""

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


def confusion_table(pairs: Sequence[tuple[str, str]]) -> dict[str, Any]:
    """Counts of (model label, reader label): {"labels": [...], "rows": {model: {reader: count}}}."""
    labels = sorted({x for pair in pairs for x in pair})
    rows = {m: {r: 0 for r in labels} for m in labels}
    for m, r in pairs:
        rows[m][r] += 1
    return {"labels": labels, "rows": rows}
