"""Every ledger test runs with empty site settings: trusted keys come only from what the test sets.

Also the PostgreSQL fixtures: one throwaway cluster for the session (tests/ledger/pgserver.py), a fresh
database per test, and ``store_url``, a new empty ledger's URL on each engine in turn.
"""

from __future__ import annotations

from collections.abc import Iterator

import pytest

from tests.ledger import pgserver


@pytest.fixture(autouse=True)
def _no_site_settings(monkeypatch, tmp_path_factory):
    for name in ("CASEFILE_TRUSTED_KEYS", "CASEFILE_TRUSTED_ENTRY_POINTS"):
        monkeypatch.delenv(name, raising=False)
    monkeypatch.setenv("CASEFILE_CONFIG_DIR", str(tmp_path_factory.mktemp("site-config")))


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


@pytest.fixture(params=["sqlite", "postgresql"])
def store_url(request, tmp_path) -> str:
    """A new ledger's location: a SQLite file, then a fresh PostgreSQL database."""
    if request.param == "sqlite":
        return str(tmp_path / "ledger.db")
    return request.getfixturevalue("pg_url")
