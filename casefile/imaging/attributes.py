"""Reading DICOM attribute values safely: numbers, functional groups, and the allow-listed metadata."""

from __future__ import annotations

import math
import re
from typing import Any

from pydicom.dataset import Dataset
from pydicom.multival import MultiValue

from casefile.errors import InputError
from casefile.imaging.identity import DIRECT_IDENTIFIERS, SAFE_ATTRIBUTES


def first(value: Any) -> Any:
    """First item of a multi-valued attribute, or the value itself."""
    if isinstance(value, (MultiValue, list, tuple)):
        return value[0] if len(value) else None
    return value


def as_int(ds: Dataset, keyword: str, name: str, default: int | None = None) -> int:
    """An integer attribute; missing -> ``default`` (or InputError if none); unreadable -> InputError."""
    label = _spaced(keyword)
    try:
        raw = ds.get(keyword)
    except Exception:  # pydicom raises many kinds on a bad value
        raise InputError(f"{name}: invalid {label} value") from None
    raw = first(raw)
    if raw is None or raw == "":
        if default is None:
            raise InputError(f"{name}: {label} is missing")
        return default
    try:
        return int(str(raw).strip())
    except ValueError:
        raise InputError(f"{name}: invalid {label} value {str(raw)[:20]!r}") from None


def as_float(value: Any) -> float | None:
    """A finite float from an attribute value, else None."""
    try:
        out = float(first(value))
    except (TypeError, ValueError):
        return None
    return out if math.isfinite(out) else None


def _spaced(keyword: str) -> str:
    out = ""
    for i, ch in enumerate(keyword):
        if ch.isupper() and i and not keyword[i - 1].isupper():
            out += " "
        out += ch
    return out


def group_value(ds: Dataset, frame: int, sequence: str, keyword: str) -> Any:
    """An attribute from the enhanced multi-frame functional groups (per-frame first, then shared)."""
    for top, index in (("PerFrameFunctionalGroupsSequence", frame), ("SharedFunctionalGroupsSequence", 0)):
        groups = ds.get(top)
        if not groups or index >= len(groups):
            continue
        inner = groups[index].get(sequence)
        if inner and keyword in inner[0]:
            return inner[0].get(keyword)
    return None


def lookup(ds: Dataset, frame: int, sequence: str, keyword: str) -> Any:
    """The top-level attribute if present, else the one inside the functional groups."""
    if keyword in ds:
        return ds.get(keyword)
    return group_value(ds, frame, sequence, keyword)


def _json_value(value: Any) -> Any:
    if isinstance(value, (MultiValue, list, tuple)):
        items = [_json_value(v) for v in value]
        return items if all(v is not None for v in items) else None
    if isinstance(value, bool):
        return value
    if isinstance(value, int):
        return int(value)
    if isinstance(value, float):
        return float(value) if math.isfinite(value) else None
    if isinstance(value, str):
        return str(value).strip()
    return None  # bytes, sequences, person names: not kept


def identifier_strings(ds: Dataset) -> list[str]:
    """Text of the direct identifiers present, whole and (for person names) by component."""
    found: list[str] = []
    for keyword in DIRECT_IDENTIFIERS:
        try:
            if keyword not in ds or ds[keyword].VR == "SQ":
                continue
            vr, value = ds[keyword].VR, ds[keyword].value
        except Exception:
            continue
        if value is None:
            continue
        for item in value if isinstance(value, (MultiValue, list)) else [value]:
            text = str(item).strip()
            parts = [text]
            if vr == "PN":
                parts += re.split(r"[\^=\s]+", text)
            found.extend(p for p in parts if len(p) >= 3 and any(ch.isalnum() for ch in p))
    return found


def _mentions(value: Any, secrets: list[str]) -> bool:
    texts = value if isinstance(value, list) else [value]
    for text in texts:
        if not isinstance(text, str):
            continue
        for secret in secrets:
            if re.search(r"(?<![A-Za-z0-9_])" + re.escape(secret) + r"(?![A-Za-z0-9_])", text, re.IGNORECASE):
                return True
    return False


def safe_metadata(ds: Dataset, transfer_syntax: str | None) -> tuple[dict[str, Any], list[str]]:
    """Only the allow-listed attributes, as JSON values; text echoing an identifier is dropped."""
    secrets = identifier_strings(ds)
    out: dict[str, Any] = {}
    notes: list[str] = []
    for keyword in SAFE_ATTRIBUTES:
        try:
            if keyword not in ds:
                continue
            value = _json_value(ds[keyword].value)
        except Exception:  # an unreadable value is simply not kept
            continue
        if value is None or value == "" or value == []:
            continue
        if _mentions(value, secrets):
            notes.append(f"{keyword} left out: it repeats an identifier value")
            continue
        out[keyword] = value
    if transfer_syntax:
        out["TransferSyntaxUID"] = transfer_syntax
    return out, notes
