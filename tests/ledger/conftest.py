"""Every ledger test runs with empty site settings: trusted keys come only from what the test sets."""

from __future__ import annotations

import pytest


@pytest.fixture(autouse=True)
def _no_site_settings(monkeypatch, tmp_path_factory):
    for name in ("CASEFILE_TRUSTED_KEYS", "CASEFILE_TRUSTED_ENTRY_POINTS"):
        monkeypatch.delenv(name, raising=False)
    monkeypatch.setenv("CASEFILE_CONFIG_DIR", str(tmp_path_factory.mktemp("site-config")))
