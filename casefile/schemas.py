"""Loads the JSON Schemas in schemas/ and validates every body before it reaches the ledger."""

from __future__ import annotations

import json
from functools import cache
from pathlib import Path
from typing import Any

from jsonschema import Draft202012Validator

from casefile.errors import ValidationError

SCHEMA_DIR = Path(__file__).resolve().parent.parent / "schemas"


def schema_path(kind: str) -> Path:
    return SCHEMA_DIR / f"{kind}.schema.json"


def known_kinds() -> list[str]:
    return sorted(p.name[: -len(".schema.json")] for p in SCHEMA_DIR.glob("*.schema.json"))


@cache
def validator(kind: str) -> Draft202012Validator:
    if not kind or not kind.replace("_", "").isalnum():
        raise ValidationError(f"entry kind {kind!r} is not a plain name")
    path = schema_path(kind)
    if not path.is_file():
        raise ValidationError(f"unknown entry kind {kind!r}: no schema {path.name} in {SCHEMA_DIR}")
    schema = json.loads(path.read_text(encoding="utf-8"))
    Draft202012Validator.check_schema(schema)
    return Draft202012Validator(schema)


def validate(kind: str, body: Any) -> None:
    """Raise ValidationError naming the kind, the first failing field and the reason."""
    v = validator(kind)
    error = next(iter(sorted(v.iter_errors(body), key=lambda e: list(e.absolute_path))), None)
    if error is not None:
        where = "/".join(str(p) for p in error.absolute_path) or "(top level)"
        raise ValidationError(f"{kind} body refused: at {where}: {error.message}")
