"""Every ledger test runs with empty site settings: trusted keys come only from what the test sets.

Also ``store_url``, a new empty ledger's URL on each engine in turn (a SQLite file, then a fresh database
on the session's PostgreSQL cluster: tests/conftest.py).
"""

from __future__ import annotations

import pytest


@pytest.fixture(autouse=True)
def _no_site_settings(monkeypatch, tmp_path_factory):
    for name in ("CASEFILE_TRUSTED_KEYS", "CASEFILE_TRUSTED_ENTRY_POINTS"):
        monkeypatch.delenv(name, raising=False)
    monkeypatch.setenv("CASEFILE_CONFIG_DIR", str(tmp_path_factory.mktemp("site-config")))


@pytest.fixture(params=["sqlite", "postgresql"])
def store_url(request, tmp_path) -> str:
    """A new ledger's location: a SQLite file, then a fresh PostgreSQL database."""
    if request.param == "sqlite":
        return str(tmp_path / "ledger.db")
    return request.getfixturevalue("pg_url")
