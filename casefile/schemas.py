"""Loads the JSON Schemas in schemas/ and validates every body before it reaches the ledger."""

from __future__ import annotations

import json
import os
import sys
from collections.abc import Callable
from functools import cache
from pathlib import Path
from typing import Any

import fastjsonschema
from jsonschema import Draft202012Validator

from casefile.errors import ValidationError


def _schema_dir() -> Path:
    """schemas/ beside the package (a source checkout or editable install), else the copy a wheel
    installs under <prefix>/share/casefile/schemas; $CASEFILE_SCHEMAS overrides both."""
    candidates = [os.environ.get("CASEFILE_SCHEMAS"), Path(__file__).resolve().parent.parent / "schemas",
                  Path(sys.prefix) / "share" / "casefile" / "schemas"]
    for c in candidates:
        if c and (Path(c) / "case.schema.json").is_file():
            return Path(c)
    return Path(__file__).resolve().parent.parent / "schemas"


SCHEMA_DIR = _schema_dir()


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


@cache
def _fast(kind: str) -> Callable[[Any], Any]:
    validator(kind)  # the kind is known and its schema is a valid draft 2020-12 schema
    return fastjsonschema.compile(json.loads(schema_path(kind).read_text(encoding="utf-8")))


def validate(kind: str, body: Any) -> None:
    """Raise ValidationError naming the kind, the first failing field and the reason.

    A compiled validator (fastjsonschema) decides quickly; when it refuses, the reference validator
    (jsonschema) names the field. tests/ledger/test_schemas.py checks that the two agree.
    """
    try:
        _fast(kind)(body)
        return
    except fastjsonschema.JsonSchemaException as exc:
        fast_message = str(exc)
    v = validator(kind)
    error = next(iter(sorted(v.iter_errors(body), key=lambda e: list(e.absolute_path))), None)
    if error is not None:
        where = "/".join(str(p) for p in error.absolute_path) or "(top level)"
        raise ValidationError(f"{kind} body refused: at {where}: {error.message}")
    raise ValidationError(f"{kind} body refused: {fast_message}")
