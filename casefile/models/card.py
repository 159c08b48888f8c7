"""Model card reading: JSON Schema validation, cross-field checks and the card's canonical digest."""

from __future__ import annotations

import hashlib
import json
import math
from functools import lru_cache
from pathlib import Path
from typing import Any

from jsonschema import Draft202012Validator

from casefile.canonical import canonical_bytes
from casefile.errors import ModelError, ValidationError
from casefile.schemas import SCHEMA_DIR

SCHEMA_PATH = SCHEMA_DIR / "model_card.schema.json"

DEFAULT_RESIZE = "bilinear"
# A card is a short JSON object (the README's example is under 1 KiB); anything far larger is not one.
MAX_CARD_BYTES = 256 * 1024


@lru_cache(maxsize=1)
def _validator() -> Draft202012Validator:
    schema = json.loads(SCHEMA_PATH.read_text(encoding="utf-8"))
    Draft202012Validator.check_schema(schema)
    return Draft202012Validator(schema)


def _where(path: Any) -> str:
    parts = [str(p) for p in path]
    return ".".join(parts) if parts else "(top level)"


def _finite(value: Any, where: str, card_name: str) -> None:
    if isinstance(value, float) and not math.isfinite(value):
        raise ModelError(f"{card_name}: field {where} is not a finite number")
    if isinstance(value, dict):
        for k, v in value.items():
            _finite(v, f"{where}.{k}" if where else k, card_name)
    elif isinstance(value, list):
        for i, v in enumerate(value):
            _finite(v, f"{where}.{i}", card_name)


def check_card(card: Any, card_name: str = "card") -> dict[str, Any]:
    """Validate a parsed card (schema, then rules the schema cannot say); return it unchanged.

    Raises ModelError "<card_name>: field <path>: <problem>" for the first problem found.
    """
    if not isinstance(card, dict):
        raise ModelError(f"{card_name}: a model card must be a JSON object")
    _finite(card, "", card_name)
    errors = sorted(_validator().iter_errors(card), key=lambda e: (len(list(e.absolute_path)), e.message))
    if errors:
        # the deepest error under the first failing field says most about what is wrong
        first = errors[0]
        field = list(first.absolute_path)[:1]
        same = [e for e in errors if list(e.absolute_path)[:1] == field]
        worst = max(same, key=lambda e: len(list(e.absolute_path)))
        if worst.validator in ("oneOf", "anyOf") and worst.context:
            worst = max(worst.context, key=lambda e: len(list(e.absolute_path)))
            where = _where(list(first.absolute_path) + list(worst.absolute_path))
        else:
            where = _where(worst.absolute_path)
        if worst.validator == "required" and isinstance(worst.instance, dict):
            missing = [k for k in worst.validator_value if k not in worst.instance]
            where = _where([*worst.absolute_path, missing[0]])
            raise ModelError(f"{card_name}: field {where} is missing (required)")
        raise ModelError(f"{card_name}: field {where}: {worst.message}")
    channels = card["input"]["channels"]
    for key in ("mean", "std"):
        n = len(card["normalisation"][key])
        if n != channels:
            raise ModelError(
                f"{card_name}: field normalisation.{key} has {n} value(s) but input.channels is {channels}"
            )
    windowing = card["windowing"]
    if isinstance(windowing, dict) and windowing.get("function", "LINEAR") == "LINEAR" and windowing["width"] < 1:
        # DICOM PS3.3 C.11.2.1.2.1: Window Width shall be >= 1 for the LINEAR function
        raise ModelError(f"{card_name}: field windowing.width must be >= 1 for the LINEAR function")
    _check_roi(card["roi"], card["input"]["width"], card["input"]["height"], card_name)
    return card


def _check_roi(roi: dict[str, Any], width: int, height: int, card_name: str) -> None:
    if roi["rule"] == "border" and 2 * roi["pixels"] >= min(width, height):
        raise ModelError(
            f"{card_name}: field roi.pixels: a border of {roi['pixels']} px leaves nothing of a "
            f"{width}x{height} input"
        )
    if roi["rule"] == "rect":
        if not (roi["x0"] < roi["x1"] <= width and roi["y0"] < roi["y1"] <= height):
            raise ModelError(
                f"{card_name}: field roi: rectangle x {roi['x0']}..{roi['x1']}, y {roi['y0']}..{roi['y1']} "
                f"is empty or outside the {width}x{height} input"
            )


def read_card(card_path: str | Path) -> dict[str, Any]:
    """Read and validate a card file; errors name the file and the field."""
    path = Path(card_path)
    if not path.is_file():
        raise ModelError(f"{path.name}: model card not found at {path}")
    try:
        with path.open("rb") as f:
            raw = f.read(MAX_CARD_BYTES + 1)
    except OSError as exc:
        raise ModelError(f"{path.name}: model card cannot be read ({exc.strerror or exc})") from None
    if len(raw) > MAX_CARD_BYTES:
        raise ModelError(f"{path.name}: model card is larger than {MAX_CARD_BYTES // 1024} KiB; a card is a short "
                         "JSON object")
    try:
        card = json.loads(raw.decode("utf-8"))
    except UnicodeDecodeError:
        raise ModelError(f"{path.name}: model card is not UTF-8 text") from None
    except json.JSONDecodeError as exc:
        raise ModelError(f"{path.name}: model card is not valid JSON (line {exc.lineno}: {exc.msg})") from None
    except RecursionError:
        raise ModelError(f"{path.name}: model card nests too deeply to be a card") from None
    return check_card(card, path.name)


def card_digest(card: dict[str, Any]) -> str:
    """SHA-256 hex of the card's canonical JSON (RFC 8785), so layout and key order do not matter."""
    try:
        return hashlib.sha256(canonical_bytes(card)).hexdigest()
    except ValidationError as exc:
        raise ModelError(f"model card cannot be made canonical: {exc}") from None
