"""Audit-row export read back with Python's csv (RFC 4180 dialect) and json modules."""

from __future__ import annotations

import csv
import json

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from casefile.errors import InputError
from casefile.exchange import export_rows

ROWS = [
    {"case_id": "c-1", "label": "nodule", "confidence": 0.873, "status": "warn", "checks": {"deletion": "pass"}},
    {"case_id": "c-2", "label": 'say "hi", then\nleave', "confidence": 0.5, "status": None, "checks": {}},
]


def test_csv_round_trip_with_quotes_commas_and_newlines(tmp_path):
    path = tmp_path / "audit.csv"
    assert export_rows(iter(ROWS), path) == 2
    with open(path, newline="", encoding="utf-8") as f:
        back = list(csv.DictReader(f))
    assert [r["case_id"] for r in back] == ["c-1", "c-2"]
    assert back[1]["label"] == 'say "hi", then\nleave'  # RFC 4180 section 2: quoted fields
    assert json.loads(back[0]["checks"]) == {"deletion": "pass"}
    assert back[1]["status"] == ""
    assert path.read_bytes().split(b"\r\n")[0] == b"case_id,label,confidence,status,checks"  # CRLF lines


def test_jsonl_one_object_a_line(tmp_path):
    path = tmp_path / "audit.jsonl"
    export_rows(ROWS, path, fmt="jsonl")
    lines = path.read_text(encoding="utf-8").splitlines()
    assert [json.loads(x) for x in lines] == ROWS


def test_bad_format_and_unknown_column_are_clear_errors(tmp_path):
    with pytest.raises(InputError, match="unknown export format"):
        export_rows(ROWS, tmp_path / "a.xml", fmt="xml")
    with pytest.raises(InputError, match="row 2 has columns not in the header: extra"):
        export_rows([{"a": 1}, {"a": 2, "extra": 3}], tmp_path / "b.csv")
    with pytest.raises(InputError, match="cannot write"):
        export_rows(ROWS, tmp_path / "missing" / "c.csv")


@settings(max_examples=20, deadline=None)
@given(st.lists(st.text(max_size=20), min_size=1, max_size=5))
def test_any_text_survives_csv(tmp_path_factory, notes):
    path = tmp_path_factory.mktemp("rows") / "n.csv"
    export_rows([{"note": n} for n in notes], path)
    with open(path, newline="", encoding="utf-8") as f:
        back = [r["note"] for r in csv.DictReader(f)]
    assert back == notes
