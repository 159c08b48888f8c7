"""Every test file says what outside source its check values come from, or that none applies and why.

Outside sources: none apply; this checks one of the project's own working rules (tests name their
source beside their values, DEVELOPERS.md "Tests") on the test files themselves.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

TESTS = Path(__file__).resolve().parent
# words by which a docstring names where its values come from (or says that nothing outside applies)
NAMES_A_SOURCE = re.compile(r"sources?\b|reference|against|RFC \d|PS3\.|ISO |standard|et al\.|from memory|"
                            r"common practice|no outside source", re.IGNORECASE)


def test_every_test_file_names_its_outside_source():
    missing = []
    for path in sorted(TESTS.rglob("test_*.py")):
        doc = ast.get_docstring(ast.parse(path.read_text(encoding="utf-8"))) or ""
        if not NAMES_A_SOURCE.search(doc):
            missing.append(str(path.relative_to(TESTS)))
    assert not missing, f"test files whose docstring names no outside source: {missing}"
