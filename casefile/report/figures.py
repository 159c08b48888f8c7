"""The period report's numbers, aggregated in SQL over the ledger's query tables (never a case body).

Which cases count: those recorded in the period (``recorded_at`` from ``since`` to ``until``, both
included, UTC), of the model asked for (a name, name@version or digest prefix), up to the ledger head
read at the start, all in one read transaction so every figure comes from the same entries. The
previous period is the one of the same length that ends one second before ``since``.

Reader figures use the readings of the period's cases recorded up to that head (the rules of
``casefile.review.readings``: a draw counts the readings recorded for it; the overall figures, the
confusion table and the reliability bins take each reader's latest reading of a case). Failed attempts
are counted for every model: their query table does not keep one.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from datetime import UTC, date, datetime, timedelta
from typing import Any

import numpy as np
from scipy import stats as sps
from sqlalchemy import and_, func, select
from sqlalchemy import case as sql_case
from sqlalchemy.engine import Connection
from sqlalchemy.sql.elements import ColumnElement

from casefile.cautions import REPORT_CAUTIONS
from casefile.errors import UsageError
from casefile.ledger import Ledger, model_condition
from casefile.ledger import tables as t
from casefile.review.agreement import confusion_table, wilson_interval
from casefile.review.calibration import reading_points, reliability
from casefile.review.readings import current_readings, for_draw, latest_by_reader, reader_label

STATUSES = ("pass", "not-run", "warn", "fail")
OUTCOMES = ("pass", "warn", "fail", "not-run")
DAY_BUCKETS_UP_TO = 62  # days; a longer period is shown by week (Monday to Sunday)
THIN = 10  # cases in a period below which rates per day or week are not drawn (our choice: a line through
# one or two cases a day suggests a trend that is not there); the totals are still given
KS_MINIMUM = 5  # cases in each period before a drift signal is given (our choice: fewer says nothing)
CURVE_POINTS = 101  # points of each cumulative confidence curve (every 0.01)
TIME_FORMAT = "%Y-%m-%dT%H:%M:%SZ"


def parse_time(text: str, what: str) -> datetime:
    """The ledger's UTC time form (``YYYY-MM-DDTHH:MM:SSZ``) or a bare date, as an aware datetime."""
    try:
        if len(text) == 10:
            return datetime.strptime(text, "%Y-%m-%d").replace(tzinfo=UTC)
        return datetime.strptime(text, TIME_FORMAT).replace(tzinfo=UTC)
    except ValueError:
        raise UsageError(f"report: {what} {text!r} is not a date (YYYY-MM-DD) or a UTC time "
                         "(YYYY-MM-DDTHH:MM:SSZ)") from None


def periods(since: str, until: str) -> dict[str, Any]:
    """This period and the previous one of the same length, as ledger time strings; a bare ``until``
    date includes that whole day."""
    start = parse_time(since, "--since")
    end = parse_time(until, "--until")
    if len(until) == 10:
        end = end.replace(hour=23, minute=59, second=59)
    if end < start:
        raise UsageError(f"report: --until {until} is before --since {since}")
    length = end - start + timedelta(seconds=1)
    prev_end = start - timedelta(seconds=1)
    prev_start = start - length
    days = (end.date() - start.date()).days + 1
    return {"since": start.strftime(TIME_FORMAT), "until": end.strftime(TIME_FORMAT),
            "seconds": int(length.total_seconds()), "days": days,
            "bucket": "day" if days <= DAY_BUCKETS_UP_TO else "week",
            "previous": {"since": prev_start.strftime(TIME_FORMAT), "until": prev_end.strftime(TIME_FORMAT)}}


def bucket_of(day: str, bucket: str) -> str:
    """The bucket a day (``YYYY-MM-DD``) falls in: the day itself, or the Monday that starts its week."""
    if bucket == "day":
        return day
    d = date.fromisoformat(day)
    return (d - timedelta(days=d.weekday())).isoformat()


def bucket_list(period: Mapping[str, Any]) -> list[str]:
    """Every bucket of the period in order, with or without cases."""
    first = date.fromisoformat(period["since"][:10])
    last = date.fromisoformat(period["until"][:10])
    out: list[str] = []
    d = first
    while d <= last:
        b = bucket_of(d.isoformat(), period["bucket"])
        if not out or out[-1] != b:
            out.append(b)
        d += timedelta(days=1)
    return out


def _share(k: int, n: int) -> float | None:
    return k / n if n else None


def _period_cond(since: str, until: str, model: str | None, head_seq: int) -> ColumnElement[bool]:
    c = t.cases.c
    parts = [c.recorded_at >= since, c.recorded_at <= until, c.seq <= head_seq]
    if model:
        parts.append(model_condition(model))
    return and_(*parts)


def _head(conn: Connection) -> tuple[int, str]:
    row = conn.execute(select(t.entries.c.seq, t.entries.c.hash).order_by(t.entries.c.seq.desc()).limit(1)).first()
    return (int(row[0]), str(row[1])) if row else (0, t.GENESIS_HASH)


def _volume(conn: Connection, cond: ColumnElement[bool], buckets: list[str], bucket: str) -> dict[str, Any]:
    c = t.cases.c
    day = func.substr(c.recorded_at, 1, 10)
    q = (select(day, c.model_name, c.model_version, func.count()).where(cond)
         .group_by(day, c.model_name, c.model_version))
    index = {b: i for i, b in enumerate(buckets)}
    by_model: dict[str, list[int]] = {}
    for d, name, version, n in conn.execute(q):
        row = by_model.setdefault(f"{name}@{version}", [0] * len(buckets))
        row[index[bucket_of(d, bucket)]] += int(n)
    models = [{"model": m, "cases": sum(v)} for m, v in sorted(by_model.items())]
    return {"total": sum(m["cases"] for m in models), "by_model": dict(sorted(by_model.items())), "models": models,
            "per_bucket": [sum(v[i] for v in by_model.values()) for i in range(len(buckets))]}


def _status(conn: Connection, cond: ColumnElement[bool], buckets: list[str], bucket: str,
            per_bucket: list[int]) -> dict[str, Any]:
    c = t.cases.c
    day = func.substr(c.recorded_at, 1, 10)
    q = select(day, c.status, func.count(), func.sum(c.flagged)).where(cond).group_by(day, c.status)
    index = {b: i for i, b in enumerate(buckets)}
    counts = {s: [0] * len(buckets) for s in STATUSES}
    flagged = [0] * len(buckets)
    for d, status, n, f in conn.execute(q):
        i = index[bucket_of(d, bucket)]
        counts.setdefault(status, [0] * len(buckets))[i] += int(n)
        flagged[i] += int(f or 0)
    total = sum(per_bucket)
    totals = {s: sum(v) for s, v in counts.items()}
    return {
        "counts": totals,
        "shares": {s: _share(n, total) for s, n in totals.items()},
        "flagged": sum(flagged), "flagged_share": _share(sum(flagged), total),
        "by_bucket": {s: [_share(v[i], per_bucket[i]) for i in range(len(buckets))] for s, v in counts.items()},
        "flagged_by_bucket": [_share(flagged[i], per_bucket[i]) for i in range(len(buckets))],
        "n_of": "cases",
    }


def _checks(conn: Connection, cond: ColumnElement[bool], buckets: list[str], bucket: str) -> dict[str, Any]:
    c, k = t.cases.c, t.case_checks.c
    day = func.substr(c.recorded_at, 1, 10)
    q = (select(day, k.name, k.outcome, func.count()).select_from(t.case_checks.join(t.cases, c.seq == k.seq))
         .where(cond).group_by(day, k.name, k.outcome))
    index = {b: i for i, b in enumerate(buckets)}
    grid: dict[str, dict[str, list[int]]] = {}
    for d, name, outcome, n in conn.execute(q):
        per = grid.setdefault(name, {o: [0] * len(buckets) for o in OUTCOMES})
        per.setdefault(outcome, [0] * len(buckets))[index[bucket_of(d, bucket)]] += int(n)
    out: dict[str, Any] = {"names": sorted(grid), "totals": {}, "not_passed_by_bucket": {}, "n_of": "cases with the check"}
    for name in sorted(grid):
        per = grid[name]
        ran = [sum(v[i] for v in per.values()) for i in range(len(buckets))]
        n = sum(ran)
        out["totals"][name] = {"cases": n, **{o: {"n": sum(per[o]), "share": _share(sum(per[o]), n)} for o in per}}
        out["not_passed_by_bucket"][name] = [_share(per["warn"][i] + per["fail"][i], ran[i])
                                              for i in range(len(buckets))]
    return out


def _confidences(conn: Connection, cond: ColumnElement[bool]) -> np.ndarray:
    """The recorded confidences, sorted by the database: one float column, never a body."""
    c = t.cases.c
    q = select(c.confidence).where(cond, c.confidence.is_not(None)).order_by(c.confidence)
    return np.fromiter((r[0] for r in conn.execute(q)), dtype=np.float64)


def cumulative_curve(values: np.ndarray, grid: np.ndarray) -> list[float] | None:
    """Share of ``values`` (sorted) at or below each grid point: the empirical distribution function."""
    if values.size == 0:
        return None
    return (np.searchsorted(values, grid, side="right") / values.size).tolist()


def _confidence(this: np.ndarray, previous: np.ndarray) -> dict[str, Any]:
    grid = np.round(np.linspace(0.0, 1.0, CURVE_POINTS), 6)
    out: dict[str, Any] = {
        "this": {"n": int(this.size), "median": float(np.median(this)) if this.size else None,
                 "mean": float(this.mean()) if this.size else None},
        "previous": {"n": int(previous.size), "median": float(np.median(previous)) if previous.size else None,
                     "mean": float(previous.mean()) if previous.size else None},
        "curve": {"grid": grid.tolist(), "this": cumulative_curve(this, grid),
                  "previous": cumulative_curve(previous, grid)},
        "ks": None, "minimum": KS_MINIMUM, "n_of": "cases with a recorded confidence",
    }
    if this.size >= KS_MINIMUM and previous.size >= KS_MINIMUM:
        res = sps.ks_2samp(this, previous)
        out["ks"] = {"statistic": float(res.statistic), "pvalue": float(res.pvalue),
                     "test": "two-sample Kolmogorov-Smirnov, two-sided (scipy.stats.ks_2samp, method auto)"}
    return out


def _review_rows(conn: Connection, cond: ColumnElement[bool], head_seq: int) -> list[dict[str, Any]]:
    r, c = t.reviews.c, t.cases.c
    q = (select(r.seq, r.case_id, r.reader, r.verdict, r.label, r.amends_seq, r.draw_id, c.label.label("model_label"),
                c.confidence).select_from(t.reviews.join(t.cases, c.case_id == r.case_id))
         .where(cond, r.seq <= head_seq).order_by(r.seq))
    return [dict(row._mapping) for row in conn.execute(q)]


def _rate(k: int, n: int) -> dict[str, Any]:
    low_high = list(wilson_interval(k, n)) if n else None
    return {"disagreements": k, "reviewed": n, "rate": _share(k, n), "wilson_95": low_high, "n_of": "cases"}


def _disagrees(readers: Mapping[str, Mapping[str, Any]]) -> bool:
    return any(b["verdict"] == "disagree" for b in readers.values())


def _reads(conn: Connection, cond: ColumnElement[bool], head_seq: int, bins: int) -> dict[str, Any]:
    rows = _review_rows(conn, cond, head_seq)
    model_label = {row["case_id"]: row["model_label"] for row in rows}
    confidence = {row["case_id"]: row["confidence"] for row in rows}
    readings = current_readings(
        {k: v for k, v in row.items() if k not in ("model_label", "confidence") and v is not None} for row in rows)
    current = latest_by_reader(readings)
    draw_ids = sorted({d for (_, _, d) in readings if d is not None})
    info: dict[str, dict[str, Any]] = {}
    if draw_ids:
        d = t.draws.c
        q = select(d.seq, d.draw_id, d.plan, d.population_size, d.sample_size).where(d.draw_id.in_(draw_ids))
        info = {row.draw_id: dict(row._mapping) for row in conn.execute(q)}
    draws = []
    for did in sorted(draw_ids, key=lambda x: (info.get(x, {}).get("seq", 0), x)):
        mine = for_draw(readings, did)
        k = sum(1 for readers in mine.values() if _disagrees(readers))
        meta = info.get(did, {})
        draws.append({"draw_id": did, "plan": meta.get("plan"), "seq": meta.get("seq"),
                      "sample_size": meta.get("sample_size"), **_rate(k, len(mine)),
                      "weighted_plan": meta.get("plan") in ("risk", "stratified")})
    pairs = [(model_label[cid], lab) for cid, readers in current.items() for b in readers.values()
             if (lab := reader_label(b, model_label[cid])) is not None]
    overall_k = sum(1 for readers in current.values() if _disagrees(readers))
    return {
        "reviews": len(rows),
        "readings": sum(len(v) for v in current.values()),
        "overall": _rate(overall_k, len(current)),
        "draws": draws,
        "confusion": {**confusion_table(pairs), "readings": len(pairs), "n_of": "readings with a reader label"},
        "reliability": reliability(reading_points(current, confidence), bins=bins),
    }


def _failures(conn: Connection, since: str, until: str, head_seq: int, top: int = 8) -> dict[str, Any]:
    f = t.failures.c
    prefix = f.file_name + ": "
    # a reason starts with the file's name; without it, the same problem in many files is one row
    starts = func.substr(f.reason, 1, func.length(prefix)) == prefix
    reason_text = sql_case((starts, func.substr(f.reason, func.length(prefix) + 1)), else_=f.reason)
    q = (select(reason_text.label("reason"), func.count().label("n"))
         .where(f.attempted_at >= since, f.attempted_at <= until, f.seq <= head_seq)
         .group_by(reason_text).order_by(func.count().desc(), reason_text))
    rows = [(str(r), int(n)) for r, n in conn.execute(q)]
    total = sum(n for _, n in rows)
    shown = [{"reason": r, "n": n, "share": _share(n, total)} for r, n in rows[:top]]
    rest = rows[top:]
    return {"total": total, "reasons": len(rows), "by_reason": shown,
            "other": {"reasons": len(rest), "n": sum(n for _, n in rest)} if rest else None,
            "n_of": "failed attempts (every model)"}


def sentences(fig: Mapping[str, Any]) -> dict[str, str]:
    """Why a section has no chart (or a thin one), section by section: said instead of an empty chart."""
    out: dict[str, str] = {}
    n = fig["cases"]["total"]
    if n == 0:
        out["cases"] = "No case was recorded in this period" + (f" for model {fig['model']}" if fig["model"] else "") + "."
        out["status"] = out["checks"] = "No cases, so no outcome rates."
    else:
        if n < THIN:
            out["thin"] = (f"Only {n} case{'s' if n != 1 else ''} in this period: rates per {fig['period']['bucket']} "
                           f"are not drawn (they need at least {THIN} cases); the table gives the counts.")
        if not fig["checks"]["names"]:
            out["checks"] = "The period's cases record no checks."
    conf = fig["confidence"]
    a, b = conf["this"]["n"], conf["previous"]["n"]
    if conf["ks"] is None:
        out["confidence"] = (f"No drift signal: it needs at least {KS_MINIMUM} cases with a confidence in each "
                             f"period (this period {a}, previous period {b}).")
    reads = fig["reads"]
    if reads["reviews"] == 0:
        out["reads"] = "No second reading of this period's cases is recorded, so there is no disagreement rate, " \
                       "confusion table or reliability diagram."
    else:
        if not reads["draws"]:
            out["draws"] = "None of the readings belongs to a draw."
        if reads["confusion"]["readings"] == 0:
            out["confusion"] = "No reading gives a reader label (unsure, or disagree without a label)."
        if reads["reliability"]["n"] == 0:
            out["reliability"] = "No agree or disagree reading of a case with a recorded confidence."
    if fig["failures"]["total"] == 0:
        out["failures"] = "No failed attempt was recorded in this period."
    return out


def period_figures(ledger: Ledger, since: str, until: str, model: str | None = None, *,
                   bins: int = 10) -> dict[str, Any]:
    """Every number of the period report as plain JSON-ready data (see the module docstring)."""
    period = periods(since, until)
    buckets = bucket_list(period)
    with ledger.engine.connect() as conn, conn.begin():
        head_seq, head_hash = _head(conn)
        cond = _period_cond(period["since"], period["until"], model, head_seq)
        prev = period["previous"]
        prev_cond = _period_cond(prev["since"], prev["until"], model, head_seq)
        volume = _volume(conn, cond, buckets, period["bucket"])
        volume["previous_total"] = int(conn.execute(select(func.count()).select_from(t.cases)
                                                    .where(prev_cond)).scalar_one())
        fig: dict[str, Any] = {
            "period": period, "model": model, "buckets": buckets,
            "ledger": {"head_seq": head_seq, "head_hash": head_hash},
            "cases": volume,
            "status": _status(conn, cond, buckets, period["bucket"], volume["per_bucket"]),
            "checks": _checks(conn, cond, buckets, period["bucket"]),
            "confidence": _confidence(_confidences(conn, cond), _confidences(conn, prev_cond)),
            "reads": _reads(conn, cond, head_seq, bins),
            "failures": _failures(conn, period["since"], period["until"], head_seq),
        }
    fig["sentences"] = sentences(fig)
    fig["cautions"] = list(REPORT_CAUTIONS)
    return fig


def nonempty(values: Iterable[float | None]) -> bool:
    return any(v is not None for v in values)


__all__ = ["DAY_BUCKETS_UP_TO", "KS_MINIMUM", "bucket_list", "bucket_of", "cumulative_curve", "nonempty",
           "period_figures", "periods", "sentences", "THIN"]
