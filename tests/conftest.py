"""Fixtures for every room's tests: one throwaway PostgreSQL cluster for the session (tests/ledger/pgserver.py)
and a fresh database in it per test."""

from __future__ import annotations

from collections.abc import Iterator

import pytest

from tests.ledger import pgserver


@pytest.fixture(scope="session")
def pg_cluster() -> Iterator[pgserver.Cluster]:
    """A PostgreSQL cluster in a temporary folder on a free loopback port, for the whole session."""
    try:
        with pgserver.cluster() as c:
            yield c
    except FileNotFoundError:
        pytest.skip("PostgreSQL's initdb is not installed (Debian package 'postgresql'); CI installs it")


@pytest.fixture()
def pg_url(pg_cluster: pgserver.Cluster) -> str:
    """The URL of a fresh, empty database in the session's cluster."""
    return pg_cluster.url(pg_cluster.new_database())
