"""Canonical JSON by RFC 8785 (JSON Canonicalization Scheme): the bytes every hash is taken over."""

from __future__ import annotations

import json
import math
import re
from json.encoder import encode_basestring
from typing import Any

from casefile.errors import ValidationError

# RFC 8785 section 3.2.2.3 serialises numbers as IEEE 754 doubles; an integer that no double holds
# exactly is refused rather than changed silently.
MAX_SAFE_INTEGER = 2**53 - 1

# json's C string encoder (ensure_ascii off) escapes exactly what RFC 8785 section 3.2.2.2 asks:
# \" \\ \b \f \n \r \t, other controls as lowercase \u00xx, everything else as itself.
_string = encode_basestring


def format_number(x: float | int) -> str:
    """Format a number the way ECMAScript's Number.prototype.toString does (RFC 8785 section 3.2.2.3)."""
    if isinstance(x, bool):
        raise TypeError("booleans are not numbers here")
    if isinstance(x, int):
        if abs(x) <= MAX_SAFE_INTEGER:
            return str(x)
        if abs(x) < 2**1024 and int(float(x)) == x:
            x = float(x)  # exactly an IEEE double (e.g. 2**53): format it as one
        else:
            raise ValidationError(f"integer {x} is not exactly representable as an IEEE 754 double")
    x = float(x)  # also numpy floats, whose repr is not a plain number
    if not math.isfinite(x):
        raise ValidationError(f"number {x!r} is not allowed in canonical JSON (NaN and infinities are refused)")
    if x == 0:
        return "0"  # also for -0.0
    sign = "-" if x < 0 else ""
    # repr gives the shortest digit string that round-trips, which is what ECMAScript requires.
    r = repr(abs(x))
    mantissa, _, exp = r.partition("e")
    exponent = int(exp) if exp else 0
    int_part, _, frac_part = mantissa.partition(".")
    digits = (int_part + frac_part).lstrip("0")
    # position of the decimal point relative to the first significant digit
    lead_zeros = len(int_part + frac_part) - len((int_part + frac_part).lstrip("0"))
    n = len(int_part) - lead_zeros + exponent  # value = 0.d1d2... x 10^n
    digits = digits.rstrip("0")
    k = len(digits)
    if k <= n <= 21:
        s = digits + "0" * (n - k)
    elif 0 < n <= 21:
        s = digits[:n] + "." + digits[n:]
    elif -6 < n <= 0:
        s = "0." + "0" * (-n) + digits
    else:
        e = n - 1
        e_str = ("+" if e >= 0 else "-") + str(abs(e))
        s = digits[0] + ("." + digits[1:] if k > 1 else "") + "e" + e_str
    return sign + s


def _utf16_key(key: str) -> bytes:
    return key.encode("utf-16-be", "surrogatepass")


def _serialise(value: Any, out: list[str]) -> None:
    if value is None:
        out.append("null")
    elif value is True:
        out.append("true")
    elif value is False:
        out.append("false")
    elif isinstance(value, str):
        out.append(_string(value))
    elif isinstance(value, int | float):
        out.append(format_number(value))
    elif isinstance(value, dict):
        for k in value:
            if not isinstance(k, str):
                raise ValidationError(f"object key {k!r} is not a string")
        out.append("{")
        first = True
        for k in sorted(value, key=_utf16_key):
            if not first:
                out.append(",")
            first = False
            out.append(_string(k))
            out.append(":")
            _serialise(value[k], out)
        out.append("}")
    elif isinstance(value, list | tuple):
        out.append("[")
        for i, item in enumerate(value):
            if i:
                out.append(",")
            _serialise(item, out)
        out.append("]")
    else:
        raise ValidationError(f"value of type {type(value).__name__} cannot be written as JSON")


_PLACEHOLDER = re.compile(r'"\\u0000(\d+)\\u0000"')
_ASTRAL = re.compile("[\U00010000-\U0010ffff]")


def _swap_floats(value: Any, floats: list[float]) -> Any:
    """A copy with each float replaced by a placeholder string; None when the fast path cannot be used."""
    if isinstance(value, str):
        return None if "\x00" in value else value
    if value is None or isinstance(value, bool):
        return value
    if isinstance(value, int):
        return value if abs(value) <= MAX_SAFE_INTEGER else None
    if isinstance(value, float):
        if not math.isfinite(value):
            return None
        floats.append(value)
        return f"\x00{len(floats) - 1}\x00"
    if isinstance(value, dict):
        out = {}
        for k, v in value.items():
            if not isinstance(k, str) or "\x00" in k or (not k.isascii() and _ASTRAL.search(k)):
                return None
            item = _swap_floats(v, floats)
            if item is None and v is not None:
                return None
            out[k] = item
        return out
    if isinstance(value, list | tuple):
        items = []
        for v in value:
            item = _swap_floats(v, floats)
            if item is None and v is not None:
                return None
            items.append(item)
        return items
    return None


def _fast_canonical(value: Any) -> str | None:
    """json's C encoder does the work when the result is provably the same as RFC 8785's:

    keys without characters beyond U+FFFF (so code-point order is UTF-16 order), no NUL in any string
    (the placeholders use it), safe integers; floats are put back in ECMAScript form afterwards.
    """
    floats: list[float] = []
    swapped = _swap_floats(value, floats)
    if swapped is None and value is not None:
        return None
    text = json.dumps(swapped, ensure_ascii=False, separators=(",", ":"), sort_keys=True)
    if not floats:
        return text
    return _PLACEHOLDER.sub(lambda m: format_number(floats[int(m.group(1))]), text)


def canonical_bytes(value: Any) -> bytes:
    """Return the RFC 8785 canonical form of ``value`` as UTF-8 bytes."""
    fast = _fast_canonical(value)
    if fast is not None:
        try:
            return fast.encode("utf-8")
        except UnicodeEncodeError as exc:
            raise ValidationError(f"text contains a lone surrogate ({exc.reason}), which is not valid UTF-8") from None
    return _slow_canonical(value)


def _slow_canonical(value: Any) -> bytes:
    """The direct serialiser (used for what the fast path declines, and by the tests to cross-check)."""
    out: list[str] = []
    _serialise(value, out)
    try:
        return "".join(out).encode("utf-8")
    except UnicodeEncodeError as exc:
        raise ValidationError(f"text contains a lone surrogate ({exc.reason}), which is not valid UTF-8") from None


def _no_duplicates(pairs: list[tuple[str, Any]]) -> dict[str, Any]:
    result: dict[str, Any] = {}
    for k, v in pairs:
        if k in result:
            raise ValidationError(f"duplicate object key {k!r}")
        result[k] = v
    return result


def _number(text: str) -> int | float:
    """I-JSON (RFC 7493) reads numbers as doubles; integers stay ints while a double holds them exactly."""
    n = int(text)
    return n if abs(n) <= MAX_SAFE_INTEGER else float(text)


def _refuse_constant(name: str) -> Any:
    raise ValidationError(f"{name} is not allowed in canonical JSON")


def parse(data: bytes | str) -> Any:
    """Parse JSON strictly: duplicate keys, NaN and infinities are refused."""
    if isinstance(data, bytes):
        try:
            data = data.decode("utf-8")
        except UnicodeDecodeError as exc:
            raise ValidationError(f"JSON is not valid UTF-8: {exc}") from None
    try:
        return json.loads(data, object_pairs_hook=_no_duplicates, parse_constant=_refuse_constant,
                          parse_int=_number)
    except json.JSONDecodeError as exc:
        raise ValidationError(f"not valid JSON: {exc}") from None


_BAD = object()


def json_ready(value: Any, *, on_bad: str = "null") -> Any:
    """A JSON-ready copy of ``value`` whose every number canonical JSON can hold exactly.

    Mappings become dicts with string keys, tuples become lists, numpy scalars become Python numbers
    and booleans. A value that cannot be stored exactly (NaN, an infinity, an integer beyond 2**53, an
    object that is not JSON) is *bad*:

    - ``on_bad="null"`` stores it as None (explanations: a NaN score shows as null, not as a gap);
    - ``on_bad="drop"`` leaves it out: a dict key whose value is bad or None is omitted, and a list
      with any bad item is bad itself (allow-listed metadata: better missing than changed).
    """
    if on_bad not in ("null", "drop"):
        raise ValueError(f"on_bad must be 'null' or 'drop', not {on_bad!r}")
    out = _ready(value, on_bad == "drop")
    return None if out is _BAD else out


def _ready(value: Any, drop: bool) -> Any:
    if type(value).__module__ == "numpy" and hasattr(value, "item") and getattr(value, "ndim", 0) == 0:
        value = value.item()  # numpy scalar (np.float32, np.int64, np.bool_) -> Python
    if isinstance(value, dict) or (hasattr(value, "items") and hasattr(value, "keys")):
        items = {str(k): _ready(v, drop) for k, v in value.items()}
        if drop:
            return {k: v for k, v in items.items() if v is not _BAD and v is not None}
        return {k: (None if v is _BAD else v) for k, v in items.items()}
    if isinstance(value, list | tuple):
        seq = [_ready(v, drop) for v in value]
        if drop:
            return _BAD if any(v is _BAD or v is None for v in seq) else seq
        return [None if v is _BAD else v for v in seq]
    if value is None or isinstance(value, bool | str):
        return value
    if isinstance(value, int):
        return value if abs(value) <= MAX_SAFE_INTEGER else _BAD
    if isinstance(value, float):
        return value if math.isfinite(value) else _BAD
    return _BAD
