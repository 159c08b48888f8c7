"""Pytest fixtures for the exchange tests: the sheet room's synthetic case and rendered sheet, reused."""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

_name = "casefile_test_sheet_conftest"
if _name not in sys.modules:
    _spec = importlib.util.spec_from_file_location(_name, Path(__file__).parent.parent / "sheet" / "conftest.py")
    sys.modules[_name] = importlib.util.module_from_spec(_spec)
    _spec.loader.exec_module(sys.modules[_name])

fx = sys.modules[_name].fx
sheet_pdf = sys.modules[_name].sheet_pdf
