"""Plain words for the values a case sheet prints: numbers, map parameters, thresholds, windows, flags.

Everything a record holds as data (dicts, lists, booleans, None) reaches the page through this room,
so the sheet never shows Python's own spelling of a value: no braces, no ``None``, no ``True``.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping
from typing import Any

from ..cautions import WEIGHTS_NOT_PINNED, WEIGHTS_PINNED

MISSING = "—"
KIND_WORDS = {"dicom": "DICOM", "raster": "raster image", "array": "picture from memory"}
OUTCOME_PAST = {"fail": "failed", "warn": "warned", "not-run": "did not run", "pass": "passed"}
# Occlusion parameters that decide only how the work is split into batches, not the map itself.
_NOT_PRINTED = frozenset({"batch_size", "batch_size_used"})
_OUTPUT_WORDS = {"probability": "drop in class probability", "logit": "drop in class logit"}
_WINDOW_SOURCE = {"file": "from the file", "file-lut": "the file's VOI LUT", "minmax": "from the pixel range",
                  "argument": "set by the card"}


_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def _scientific(v: float) -> str:
    """``2.55 × 10⁻⁷``: powers of ten as a reader writes them, not as ``2.55e-07``."""
    mantissa, exp = f"{v:.2e}".split("e")
    mantissa = mantissa.rstrip("0").rstrip(".")
    return f"{mantissa} × 10{str(int(exp)).translate(_SUPERSCRIPT)}"


def number(v: Any) -> str:
    """A number as a reader wants it: three significant figures, whole numbers whole, very large or
    very small ones with a power of ten."""
    if v is None:
        return MISSING
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, int):
        return str(v) if abs(v) < 10**7 else _scientific(float(v))
    if isinstance(v, float):
        if v != v:
            return "not a number"
        if v in (float("inf"), float("-inf")):
            return "infinite" if v > 0 else "minus infinite"
        if v == int(v) and abs(v) < 10**7:
            return str(int(v))
        if abs(v) >= 10**7 or abs(v) < 1e-3:
            return _scientific(v)
        return f"{v:.3g}" if abs(v) < 1000 else f"{v:.0f}"
    return str(v)


def key_words(key: Any) -> str:
    """``blur_sigma`` -> ``blur sigma``."""
    return str(key).replace("_", " ").strip()


def value(v: Any) -> str:
    """Any plain-data value in words: lists as ``16 × 16``, mappings as ``key value`` pairs."""
    if v is None:
        return "not set"
    if isinstance(v, bool | int | float):
        return number(v)
    if isinstance(v, Mapping):
        return pairs(v.items())
    if isinstance(v, list | tuple):
        if v and all(isinstance(x, int | float) and not isinstance(x, bool) for x in v):
            return " × ".join(number(x) for x in v)
        return ", ".join(value(x) for x in v) or "none"
    return str(v)


def pairs(items: Iterable[tuple[Any, Any]]) -> str:
    """``key value`` pairs joined by commas (nested mappings in parentheses, never braces)."""
    out = []
    for k, v in items:
        text = value(v)
        out.append(f"{key_words(k)} ({text})" if isinstance(v, Mapping) else f"{key_words(k)} {text}")
    return ", ".join(out)


def threshold(v: Any) -> str:
    """A check's threshold: a number, or a mapping such as ``pass 0.5, fail 0.7``."""
    if v is None:
        return MISSING
    return value(v)


def _fill(params: Mapping[str, Any]) -> str:
    fill, sigma, patch = params.get("fill"), params.get("blur_sigma"), params.get("patch")
    if fill == "blur":
        if isinstance(sigma, int | float) and not isinstance(sigma, bool):
            return f"fill: blur σ {number(sigma)} px"
        if isinstance(patch, int | float) and not isinstance(patch, bool):
            # the occlusion room's documented default: sigma = patch / 4, at least 1 (explain/occlusion.py)
            return f"fill: blur σ {number(max(1.0, patch / 4.0))} px (a quarter of the patch)"
        return "fill: blur"
    if fill == "mean":
        return "fill: the picture's mean"
    if fill is None:
        return ""
    return f"fill: constant {value(fill)}"


def _px(v: Any) -> str:
    return f"{value(v)} px"


# Known map parameters, in the order a reader wants them: (key, words for its value).
_FIRST: tuple[tuple[str, Callable[[Any], str]], ...] = (
    ("layer", lambda v: f"layer {value(v)}"),
    ("patch", lambda v: f"patch {_px(v)}"),
    ("stride", lambda v: f"stride {_px(v)}"),
)
_MORE: tuple[tuple[str, Callable[[Any], str]], ...] = (
    ("grid", lambda v: f"grid of {value(v)} positions"),
    ("output", lambda v: f"value: {_OUTPUT_WORDS.get(str(v), value(v))}"),
    ("value", lambda v: f"value: {value(v)}"),
    ("target", lambda v: f"target class {value(v)}"),
)


def params(method: str, p: Any) -> list[str]:
    """The parameters of one map as short sentences, e.g. ``patch 16 px, stride 8 px, fill: blur σ 4 px``.

    Known keys get words and units; any other key is printed as ``key value``. An approximate map
    (``exact`` false) always says so, with its mode, fidelity setting and its own summary.
    """
    if not isinstance(p, Mapping) or not p:
        return ["no parameters recorded"]
    first = [say(p[k]) for k, say in _FIRST if k in p]
    if _fill(p):
        first.append(_fill(p))
    more: list[str] = []
    used = p.get("patch_used")
    if used is not None and not (isinstance(used, list | tuple) and all(x == p.get("patch") for x in used)):
        more.append(f"patch used {_px(used)}")  # shown only when it differs from the patch asked for
    more += [say(p[k]) for k, say in _MORE if k in p]
    done = {k for k, _ in (*_FIRST, *_MORE)} | _NOT_PRINTED | {"mode", "exact", "summary", "fill", "blur_sigma",
                                                               "patch_used", "fidelity", "notes"}
    rest = [(k, v) for k, v in p.items() if k not in done]
    if rest:
        more.append(pairs(rest))
    lines = [", ".join(part) for part in (first, more) if part]
    lines.extend(fidelity(p))
    return lines or ["no parameters recorded"]


_MODE_WORDS = {
    "incremental": "computed incrementally, as changes to one cached run",
    "batched": "one forward pass per position",
    "truncated": "projective fields truncated",
    "coarse-to-fine": "coarse to fine",
}


def fidelity(p: Mapping[str, Any]) -> list[str]:
    """``exact`` / ``mode`` / ``fidelity`` / ``summary`` / ``notes`` of a map in words; nothing when the
    record has none of them. An approximate map always says so."""
    exact, mode, summary = p.get("exact"), p.get("mode"), p.get("summary")
    bits = [_MODE_WORDS.get(str(mode), key_words(mode))] if mode not in (None, "") else []
    if p.get("fidelity") is not None:
        bits.append(f"fidelity {value(p['fidelity'])}")
    inner = f" ({', '.join(bits)})" if bits else ""
    if exact is False:
        out = ["approximate map" + (inner or " (fidelity setting not recorded)") + (f": {summary}" if summary else "")]
    elif exact is True:
        out = ["exact map" + inner]
    else:
        out = ([", ".join(bits)] if bits else []) + ([str(summary)] if summary else [])
    notes = p.get("notes")
    if isinstance(notes, list | tuple):
        out.extend(str(n) for n in notes if n)
    return out


def window(w: Any) -> str:
    """The display window: ``window centre 2048, width 4096, linear (from the file)``."""
    if not isinstance(w, Mapping) or not w:
        return "no window (shown as stored)"
    source = _WINDOW_SOURCE.get(str(w.get("source")), key_words(w.get("source") or ""))
    if "center" in w or "width" in w:
        text = f"window centre {number(w.get('center'))}, width {number(w.get('width'))}"
        if w.get("function"):
            text += f", {key_words(str(w['function'])).lower()}"
    elif w.get("source") == "file-lut":
        text = "window: the file's VOI LUT"
        source = ""
        extra = {k: v for k, v in w.items() if k not in ("source",)}
        if extra:
            text += f" ({pairs(extra.items())})"
        return text
    else:
        text = "window " + pairs((k, v) for k, v in w.items() if k != "source")
    rest = {k: v for k, v in w.items() if k not in ("center", "width", "function", "source")}
    if rest:
        text += ", " + pairs(rest.items())
    return f"{text} ({source})" if source else text


def kind(k: Any) -> str:
    return KIND_WORDS.get(str(k), key_words(k) if k else "unknown kind")


def check_name(name: Any) -> str:
    """``region_focus`` -> ``region focus`` (for sentences; tables keep the recorded name)."""
    return str(name).replace("_", " ").replace("-", " ")


def weights(model: Mapping[str, Any]) -> tuple[str, bool] | None:
    """(words, is_a_caution) for ``model.weights_pinned``; None when the record does not say."""
    pinned = model.get("weights_pinned")
    if pinned is True:
        return WEIGHTS_PINNED, False
    if pinned is False:
        return WEIGHTS_NOT_PINNED, True
    return None


def flags(case: Mapping[str, Any]) -> tuple[str, bool] | None:
    """(sentence, sent_to_a_person) about flags and notes; None when the record holds no flag data.

    e.g. ``Sent for a second read: region focus failed`` or ``No flags; notes: method agreement warned``.
    """
    checks = [c for c in case.get("checks") or [] if isinstance(c, Mapping)]
    has_check_flags = any("flags" in c for c in checks)
    if "flagged" not in case and "flags" not in case and not has_check_flags:
        return None
    named = case.get("flags") if isinstance(case.get("flags"), list) else None
    by_name = {str(c.get("name")): c for c in checks}
    if named is None:
        named = [str(c.get("name")) for c in checks if c.get("flags") is True]
    flagged = case.get("flagged")
    if not isinstance(flagged, bool):
        flagged = bool(named)

    def said(name: str) -> str:
        c = by_name.get(name)
        out = OUTCOME_PAST.get(str(c.get("outcome")), str(c.get("outcome"))) if c else ""
        return f"{check_name(name)} {out}".strip()

    notes = [said(str(c.get("name"))) for c in checks
             if str(c.get("name")) not in named and c.get("outcome") in ("warn", "fail")]
    tail = f"; notes: {', '.join(notes)}" if notes else ""
    if flagged:
        why = ", ".join(said(str(n)) for n in named) or "reason not recorded"
        return f"Sent for a second read: {why}{tail}", True
    return (f"No flags{tail}" if notes else "No flags; no notes"), False


def check_role(ch: Mapping[str, Any]) -> str:
    """``flag`` when this check's outcome sends the case to a person, ``note`` when it informs."""
    f = ch.get("flags")
    if f is True:
        return "flag"
    if f is False:
        return "note"
    return MISSING
