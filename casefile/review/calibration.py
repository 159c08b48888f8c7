"""Reliability of the model's confidence against second readers: equal-width confidence bins, the share
of readings that agreed with the model in each, and the expected calibration error (ECE).

Definition (Guo et al. 2017, "On Calibration of Modern Neural Networks", section 2, equal-width bins):
``ECE = sum_b (n_b / N) * |agree_b - conf_b|`` where ``agree_b`` is the share of points in bin ``b`` that
agreed and ``conf_b`` their mean confidence. Here a point is one reader's current reading of a case:
``agree`` counts as 1, ``disagree`` as 0, ``unsure`` is left out (it says nothing about the label). Bin
``b`` (from 0) of ``k`` holds confidences in ``[b/k, (b+1)/k)``, the last bin also 1.0 (the paper's bins
are closed on the right instead; only a confidence exactly on an edge can fall differently). A reader
agreeing is not ground truth: this is agreement with readers, not accuracy.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any

from casefile.errors import ValidationError

N_OF = "readings"


def reliability(points: Iterable[tuple[float, bool]], bins: int = 10) -> dict[str, Any]:
    """Bins of ``(confidence, agreed)`` points and the ECE; ``ece`` is None when there are no points.
    Empty bins are listed with ``n`` 0 and no share, so a chart can say where there were no readings."""
    if not isinstance(bins, int) or isinstance(bins, bool) or not 1 <= bins <= 100:
        raise ValidationError(f"reliability bins must be a whole number from 1 to 100, not {bins!r}")
    counts = [0] * bins
    conf_sum = [0.0] * bins
    agreed_sum = [0] * bins
    for conf, agreed in points:
        c = float(conf)
        if not 0.0 <= c <= 1.0:
            raise ValidationError(f"confidence {conf!r} is outside 0..1")
        b = min(int(c * bins), bins - 1)
        counts[b] += 1
        conf_sum[b] += c
        agreed_sum[b] += bool(agreed)
    total = sum(counts)
    rows = []
    ece = 0.0
    for b in range(bins):
        n = counts[b]
        row: dict[str, Any] = {"low": b / bins, "high": (b + 1) / bins, "n": n,
                               "mean_confidence": None, "agree_share": None}
        if n:
            row["mean_confidence"] = conf_sum[b] / n
            row["agree_share"] = agreed_sum[b] / n
            ece += n / total * abs(row["agree_share"] - row["mean_confidence"])
        rows.append(row)
    return {"bins": rows, "n": total, "n_of": N_OF, "ece": ece if total else None,
            "meaning": "share of readers' readings that agreed with the model, by model confidence; "
                       "agreement with readers, not accuracy"}


def reading_points(current: Mapping[str, Mapping[str, Mapping[str, Any]]],
                   confidence: Mapping[str, float | None]) -> list[tuple[float, bool]]:
    """``(confidence, agreed)`` per current reading (``{case: {reader: review body}}``), leaving out
    ``unsure`` readings and cases without a recorded confidence."""
    out = []
    for case_id, readers in sorted(current.items()):
        conf = confidence.get(case_id)
        if conf is None:
            continue
        for body in readers.values():
            if body["verdict"] in ("agree", "disagree"):
                out.append((float(conf), body["verdict"] == "agree"))
    return out


__all__ = ["N_OF", "reading_points", "reliability"]
