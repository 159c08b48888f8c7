"""The readers of the query tables give the same answers on PostgreSQL as on SQLite: a period report's
figures, the second-read summary, the audit listing and a new draw, from one ledger copied across.

Outside sources: a real PostgreSQL server (a throwaway cluster, tests/ledger/pgserver.py) and SQLite
itself; RFC 8785 canonical JSON makes the copied bodies, and so the hashes, identical (test_copy.py),
so any difference found here is a difference in how the two engines answer the same queries.
"""

from __future__ import annotations

import json

import pytest

from casefile.audit import audit_rows
from casefile.ledger import Ledger, copy_ledger
from casefile.report.figures import period_figures
from casefile.review import draw
from casefile.review.stats import summarise

from .conftest import PERIOD


def _plain(value: object) -> object:
    """JSON round trip: a tuple and a list, or 1 and True, compare as a user of --json would see them."""
    return json.loads(json.dumps(value, sort_keys=True, default=str))


@pytest.fixture(scope="module")
def both(scenario, pg_cluster, tmp_path_factory):
    """The report scenario's ledger and its copy on PostgreSQL, both opened."""
    lite = str(tmp_path_factory.mktemp("engines") / "lite.db")
    copy_ledger(scenario, lite)  # a copy of our own: this module draws, and the scenario is shared
    url = pg_cluster.url(pg_cluster.new_database())
    copy_ledger(lite, url)
    a, b = Ledger(lite), Ledger(url)
    yield a, b
    a.close()
    b.close()


def test_the_copy_has_the_same_head(both):
    a, b = both
    assert a.head() == b.head() and a.head()[0] > 1500


@pytest.mark.parametrize("model", [None, "tiny-cast@1.1"])
def test_period_figures_are_the_same(both, model):
    a, b = both
    fa = period_figures(a, *PERIOD, model)
    fb = period_figures(b, *PERIOD, model)
    assert fa["cases"]["total"] > 0 and fa["reads"]["draws"]  # the period holds cases and readings
    assert _plain(fa) == _plain(fb)


def test_review_summary_and_audit_are_the_same(both):
    a, b = both
    assert _plain(summarise(a)) == _plain(summarise(b))
    for kwargs in ({}, {"since": "2026-10-01T00:00:00Z", "until": "2026-10-15T00:00:00Z"}, {"flagged": True},
                   {"status": "fail"}, {"kind": "review"}):
        ra, rb = audit_rows(a, **kwargs), audit_rows(b, **kwargs)
        assert ra, kwargs
        assert _plain(ra) == _plain(rb), kwargs


def test_a_new_draw_draws_the_same_members(both):
    a, b = both
    da = draw(a, "risk", share=0.05, seed=11, filters={"since": "2026-10-20T00:00:00Z"})
    db = draw(b, "risk", share=0.05, seed=11, filters={"since": "2026-10-20T00:00:00Z"})
    assert da.body["members"] and da.body == db.body and da.hash == db.hash
