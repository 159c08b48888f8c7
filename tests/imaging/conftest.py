"""Fixtures for the imaging tests."""

from __future__ import annotations

from pathlib import Path

import pytest


@pytest.fixture
def site_key(tmp_path: Path) -> Path:
    """A key file path inside tmp_path (created by load on first use), so nothing touches $HOME."""
    return tmp_path / "keys" / "site.key"
