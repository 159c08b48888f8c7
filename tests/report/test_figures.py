"""The report's figures against independent computations.

Outside sources: counts and rates against raw SQL run with Python's own sqlite3 module over the query
tables (not casefile's SQLAlchemy code); the Kolmogorov-Smirnov statistic and p-value against
``scipy.stats.ks_2samp`` (reference library); Wilson intervals against
``scipy.stats.binomtest(k, n).proportion_ci(method="wilson")`` (reference library); the expected
calibration error against a direct numpy formula of Guo et al. 2017, "On Calibration of Modern Neural
Networks", section 2 (equal-width bins, ECE = sum_b n_b/N |acc_b - conf_b|).
"""

from __future__ import annotations

import sqlite3
from collections import Counter, defaultdict

import numpy as np
import pytest
from scipy import stats

from casefile.report import period_figures

from .conftest import PERIOD

SINCE, UNTIL = "2026-10-01T00:00:00Z", "2026-10-30T23:59:59Z"
PREV = ("2026-09-01T00:00:00Z", "2026-09-30T23:59:59Z")


@pytest.fixture(scope="module")
def fig(scenario):
    from casefile.ledger import Ledger

    with Ledger(scenario) as led:
        return period_figures(led, *PERIOD)


@pytest.fixture(scope="module")
def raw(scenario):
    con = sqlite3.connect(scenario)
    yield con
    con.close()


def test_period_and_previous_period_have_the_same_length(fig):
    p = fig["period"]
    assert (p["since"], p["until"]) == (SINCE, UNTIL)
    assert (p["previous"]["since"], p["previous"]["until"]) == PREV
    assert p["days"] == 30 and p["bucket"] == "day" and len(fig["buckets"]) == 30


def test_cases_per_day_per_model_version_equal_raw_sql(fig, raw):
    got = {(m, fig["buckets"][i]): n for m, row in fig["cases"]["by_model"].items() for i, n in enumerate(row) if n}
    want = {(f"{name}@{ver}", day): n for day, name, ver, n in raw.execute(
        "SELECT substr(recorded_at, 1, 10), model_name, model_version, COUNT(*) FROM cases "
        "WHERE recorded_at BETWEEN ? AND ? GROUP BY 1, 2, 3", (SINCE, UNTIL))}
    assert got == want
    assert {m["model"] for m in fig["cases"]["models"]} == {"tiny-cast@1.0", "tiny-cast@1.1"}  # version change
    prev = raw.execute("SELECT COUNT(*) FROM cases WHERE recorded_at BETWEEN ? AND ?", PREV).fetchone()[0]
    assert fig["cases"]["previous_total"] == prev > 0


def test_status_and_flag_rates_equal_raw_sql(fig, raw):
    total = raw.execute("SELECT COUNT(*) FROM cases WHERE recorded_at BETWEEN ? AND ?", (SINCE, UNTIL)).fetchone()[0]
    assert fig["cases"]["total"] == total
    for status, n in raw.execute("SELECT status, COUNT(*) FROM cases WHERE recorded_at BETWEEN ? AND ? "
                                 "GROUP BY status", (SINCE, UNTIL)):
        assert fig["status"]["counts"][status] == n
        assert fig["status"]["shares"][status] == pytest.approx(n / total, abs=1e-12)
    flagged = raw.execute("SELECT SUM(flagged) FROM cases WHERE recorded_at BETWEEN ? AND ?",
                          (SINCE, UNTIL)).fetchone()[0]
    assert fig["status"]["flagged"] == flagged
    day = fig["buckets"].index("2026-10-12")
    n_day, fail_day = raw.execute("SELECT COUNT(*), SUM(status = 'fail') FROM cases WHERE recorded_at LIKE "
                                  "'2026-10-12%'").fetchone()
    assert fig["status"]["by_bucket"]["fail"][day] == pytest.approx(fail_day / n_day, abs=1e-12)


def test_check_outcome_rates_equal_raw_sql(fig, raw):
    rows = raw.execute("SELECT k.name, k.outcome, COUNT(*) FROM case_checks k JOIN cases c ON c.seq = k.seq "
                       "WHERE c.recorded_at BETWEEN ? AND ? GROUP BY 1, 2", (SINCE, UNTIL)).fetchall()
    per = defaultdict(dict)
    for name, outcome, n in rows:
        per[name][outcome] = n
    assert sorted(per) == fig["checks"]["names"]
    for name, outcomes in per.items():
        tot = fig["checks"]["totals"][name]
        assert tot["cases"] == sum(outcomes.values())
        for outcome, n in outcomes.items():
            assert tot[outcome]["n"] == n
            assert tot[outcome]["share"] == pytest.approx(n / tot["cases"], abs=1e-12)


def _conf(raw, since, until):
    return np.array([r[0] for r in raw.execute("SELECT confidence FROM cases WHERE recorded_at BETWEEN ? AND ? "
                                                "AND confidence IS NOT NULL", (since, until))])


def test_drift_signal_equals_scipy_ks_2samp(fig, raw):
    a, b = _conf(raw, SINCE, UNTIL), _conf(raw, *PREV)
    ref = stats.ks_2samp(a, b)  # reference: scipy
    ks = fig["confidence"]["ks"]
    assert ks["statistic"] == pytest.approx(ref.statistic, abs=1e-12)
    assert ks["pvalue"] == pytest.approx(ref.pvalue, rel=1e-9, abs=1e-300)
    assert ks["statistic"] > 0.1  # the scenario's version change lowers confidence: the signal must see it
    # the cumulative curve at 0.8 is the empirical share at or below 0.8
    j = fig["confidence"]["curve"]["grid"].index(0.8)
    assert fig["confidence"]["curve"]["this"][j] == pytest.approx(np.mean(a <= 0.8), abs=1e-12)


def _readings(raw):
    """(case_id, reader, verdict, label, draw_id, model label, confidence) of the period's cases; the fixture
    records one reading per reader and draw, so every reading is current."""
    return raw.execute("SELECT r.case_id, r.reader, r.verdict, r.label, r.draw_id, c.label, c.confidence "
                       "FROM reviews r JOIN cases c ON c.case_id = r.case_id "
                       "WHERE c.recorded_at BETWEEN ? AND ?", (SINCE, UNTIL)).fetchall()


def test_disagreement_per_draw_and_wilson_equal_raw_counts_and_scipy(fig, raw):
    rows = _readings(raw)
    by_draw = defaultdict(lambda: defaultdict(list))
    for case_id, _, verdict, _, draw_id, _, _ in rows:
        by_draw[draw_id][case_id].append(verdict)
    assert {d["draw_id"] for d in fig["reads"]["draws"]} == set(by_draw)
    for d in fig["reads"]["draws"]:
        cases = by_draw[d["draw_id"]]
        k = sum(1 for vs in cases.values() if "disagree" in vs)
        assert (d["disagreements"], d["reviewed"]) == (k, len(cases))
        ci = stats.binomtest(k, len(cases)).proportion_ci(confidence_level=0.95, method="wilson")  # reference
        assert d["wilson_95"] == pytest.approx([ci.low, ci.high], abs=1e-9)
    assert fig["reads"]["reviews"] == len(rows)


def test_confusion_table_equals_raw_counts(fig, raw):
    pairs = Counter()
    for _, _, verdict, label, _, model_label, _ in _readings(raw):
        if verdict == "agree":
            pairs[(model_label, model_label)] += 1
        elif verdict == "disagree" and label:
            pairs[(model_label, label)] += 1
    conf = fig["reads"]["confusion"]
    got = Counter({(m, r): n for m, row in conf["rows"].items() for r, n in row.items() if n})
    assert got == pairs and conf["readings"] == sum(pairs.values())


def test_ece_equals_direct_numpy_formula(fig, raw):
    # each reader's latest reading of a case (readers here read each case once, in one draw)
    latest = {}
    for case_id, reader, verdict, _, _, _, conf in _readings(raw):
        latest[(case_id, reader)] = (verdict, conf)
    pts = [(c, v == "agree") for v, c in latest.values() if v in ("agree", "disagree")]
    conf = np.array([c for c, _ in pts])
    acc = np.array([a for _, a in pts], dtype=float)
    b = np.minimum((conf * 10).astype(int), 9)  # equal-width bins [k/10, (k+1)/10), 1.0 in the last
    ece = sum(np.sum(b == k) / len(conf) * abs(acc[b == k].mean() - conf[b == k].mean())
              for k in range(10) if np.any(b == k))
    rel = fig["reads"]["reliability"]
    assert rel["n"] == len(pts)
    assert rel["ece"] == pytest.approx(ece, abs=1e-12)


def test_failed_attempts_by_reason_equal_raw_rows(fig, raw):
    reasons = Counter()
    for name, reason in raw.execute("SELECT file_name, reason FROM failures WHERE attempted_at BETWEEN ? AND ?",
                                    (SINCE, UNTIL)):
        reasons[reason[len(name) + 2:] if reason.startswith(name + ": ") else reason] += 1
    got = {r["reason"]: r["n"] for r in fig["failures"]["by_reason"]}
    assert got == dict(reasons)
    assert fig["failures"]["total"] == sum(reasons.values()) > 0
    assert not any(r.startswith("bad_") for r in got)  # the file name is not part of the reason


def test_verification_names_the_ledger_head(fig, raw):
    seq, digest = raw.execute("SELECT seq, hash FROM entries ORDER BY seq DESC LIMIT 1").fetchone()
    assert fig["ledger"] == {"head_seq": seq, "head_hash": digest}


def test_a_long_period_is_counted_by_iso_week(scenario, raw):
    """Weeks run Monday to Sunday (ISO 8601 week, section 2.2.10): counts per week from raw rows."""
    from datetime import date, timedelta

    from casefile.ledger import Ledger

    with Ledger(scenario) as led:
        fig = period_figures(led, "2026-09-01", "2026-10-30")  # 60 days: still by day
        assert fig["period"]["bucket"] == "day"
        fig = period_figures(led, "2026-08-20", "2026-10-30")  # 72 days: by week
    assert fig["period"]["bucket"] == "week"
    want = Counter()
    for (day,) in raw.execute("SELECT substr(recorded_at, 1, 10) FROM cases WHERE recorded_at BETWEEN ? AND ?",
                              ("2026-08-20T00:00:00Z", "2026-10-30T23:59:59Z")):
        d = date.fromisoformat(day)
        want[(d - timedelta(days=d.isoweekday() - 1)).isoformat()] += 1
    got = {b: n for b, n in zip(fig["buckets"], fig["cases"]["per_bucket"], strict=True) if n}
    assert got == dict(want)
    assert all(date.fromisoformat(b).isoweekday() == 1 for b in fig["buckets"])


def test_over_the_whole_ledger_the_draw_figures_equal_casefile_stats(scenario):
    """The same readings rules as `casefile stats` (checked against scipy and statsmodels in tests/review)."""
    from casefile.ledger import Ledger
    from casefile.review import summarise

    with Ledger(scenario) as led:
        fig = period_figures(led, "2026-01-01", "2026-12-31")
        stats_ = summarise(led)
    mine = {d["draw_id"]: (d["disagreements"], d["reviewed"], d["wilson_95"]) for d in fig["reads"]["draws"]}
    theirs = {d["draw_id"]: (d["disagreements"], d["reviewed"], d["wilson_95"]) for d in stats_["draws"]}
    assert mine == theirs
    assert fig["reads"]["reliability"]["ece"] == pytest.approx(stats_["reliability"]["ece"], abs=1e-12)
    assert fig["reads"]["confusion"]["rows"] == stats_["agreement"]["confusion"]["rows"]
