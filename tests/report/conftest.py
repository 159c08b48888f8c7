"""Shared fixtures for the report tests: a ledger of invented cases over 60 days, with two draws read."""

from __future__ import annotations

import pytest

from casefile.ledger import Ledger
from casefile.review import draw
from demo_cases.period import populate, read_draw

START = "2026-09-01"
DAYS = 60  # cases from 2026-09-01 to 2026-10-30; the model changes version on day 40 (2026-10-11)
PERIOD = ("2026-10-01", "2026-10-30")  # 30 days; the previous period is 2026-09-01 to 2026-09-30


@pytest.fixture(scope="module")
def scenario(tmp_path_factory):
    path = tmp_path_factory.mktemp("report") / "period.db"
    led = Ledger(str(path), synchronous="NORMAL")
    populate(led, 1500, start=START, days=DAYS, seed=3, failures=45)
    first = draw(led, "random", size=60, seed=1, filters={"since": "2026-10-01T00:00:00Z"})
    read_draw(led, first.body, seed=1)
    second = draw(led, "random", size=25, seed=2, filters={"since": "2026-10-15T00:00:00Z"})
    read_draw(led, second.body, readers=("reader-c",), seed=2)
    led.close()
    yield str(path)


@pytest.fixture()
def ledger(scenario):
    led = Ledger(scenario)
    yield led
    led.close()
