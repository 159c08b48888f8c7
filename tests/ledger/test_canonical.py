"""Canonical JSON against RFC 8785 (its own examples) and the rfc8785 package (reference library)."""

import math
import struct

import pytest
import rfc8785
from hypothesis import given, settings
from hypothesis import strategies as st

from casefile.canonical import _slow_canonical, canonical_bytes, parse
from casefile.errors import ValidationError

# RFC 8785 section 3.2.3, the example input and its canonical output (written from the RFC's text).
RFC_3_2_3_INPUT = r'''{
  "numbers": [333333333.33333329, 1E30, 4.50,
              2e-3, 0.000000000000000000000000001],
  "string": "\u20ac$\u000F\u000aA'\u0042\u0022\u005c\\\"\/",
  "literals": [null, true, false]
}'''
RFC_3_2_3_OUTPUT = ('{"literals":[null,true,false],"numbers":[333333333.3333333,1e+30,4.5,0.002,1e-27],'
                    '"string":"\u20ac$\\u000f\\nA\'B\\"\\\\\\\\\\"/"}').encode("utf-8")

# RFC 8785 Appendix B: IEEE 754 bit patterns and their ECMAScript serialisation.
APPENDIX_B = [
    ("0000000000000000", "0"),
    ("8000000000000000", "0"),  # minus zero
    ("0000000000000001", "5e-324"),
    ("8000000000000001", "-5e-324"),
    ("7fefffffffffffff", "1.7976931348623157e+308"),
    ("ffefffffffffffff", "-1.7976931348623157e+308"),
    ("4340000000000000", "9007199254740992"),
    ("c340000000000000", "-9007199254740992"),
    ("4430000000000000", "295147905179352830000"),
    ("44b52d02c7e14af5", "9.999999999999997e+22"),
    ("44b52d02c7e14af6", "1e+23"),
    ("44b52d02c7e14af7", "1.0000000000000001e+23"),
    ("444b1ae4d6e2ef4e", "999999999999999700000"),
    ("444b1ae4d6e2ef4f", "999999999999999900000"),
    ("444b1ae4d6e2ef50", "1e+21"),
    ("3eb0c6f7a0b5ed8c", "9.999999999999997e-7"),
    ("3eb0c6f7a0b5ed8d", "0.000001"),
    ("41b3de4355555553", "333333333.3333332"),
    ("41b3de4355555554", "333333333.33333325"),
    ("41b3de4355555555", "333333333.3333333"),
    ("41b3de4355555556", "333333333.3333334"),
    ("41b3de4355555557", "333333333.33333343"),
    ("becbf647612f3696", "-0.0000033333333333333333"),
    ("43143ff3c1cb0959", "1424953923781206.2"),
]


def _double(hex_bits: str) -> float:
    return struct.unpack(">d", bytes.fromhex(hex_bits))[0]


def test_rfc8785_section_3_2_3_example_byte_for_byte():
    assert canonical_bytes(parse(RFC_3_2_3_INPUT)) == RFC_3_2_3_OUTPUT


@pytest.mark.parametrize("bits,expected", APPENDIX_B)
def test_rfc8785_appendix_b_numbers(bits, expected):
    assert canonical_bytes(_double(bits)) == expected.encode("ascii")


@pytest.mark.parametrize("bits", ["7fffffffffffffff", "7ff0000000000000", "fff0000000000000"])
def test_nan_and_infinities_refused(bits):
    # RFC 8785 Appendix B: NaN and Infinity "must cause an error".
    with pytest.raises(ValidationError):
        canonical_bytes({"x": _double(bits)})


def test_property_sorting_by_utf16_code_units():
    # RFC 8785 section 3.2.3 sorting example: U+1F600 (surrogates D83D DE00) sorts before U+FB33.
    keys = ["\u20ac", "\r", "\ufb33", "1", "\U0001f600", "\u0080", "\u00f6"]
    out = canonical_bytes({k: i for i, k in enumerate(keys)}).decode("utf-8")
    order = [out.index('"' + (k if k != "\r" else "\\r") + '"') for k in
             ["\r", "1", "\u0080", "\u00f6", "\u20ac", "\U0001f600", "\ufb33"]]
    assert order == sorted(order)
    # a code-point sort would put U+1F600 last; UTF-16 puts it before U+FB33
    assert out.index("\U0001f600") < out.index("\ufb33")


def test_strict_parse_refuses_duplicates_and_constants():
    with pytest.raises(ValidationError):
        parse('{"a": 1, "a": 2}')
    with pytest.raises(ValidationError):
        parse('{"a": NaN}')
    with pytest.raises(ValidationError):
        parse(b"\xff\xfe")


def test_large_integers_refused_rather_than_rounded():
    with pytest.raises(ValidationError):
        canonical_bytes({"n": 2**53 + 1})  # not a double: 2**53+1 rounds
    assert canonical_bytes(2**53 - 1) == b"9007199254740991"


json_scalars = (st.none() | st.booleans() | st.integers(-(2**53) + 1, 2**53 - 1)
                | st.floats(allow_nan=False, allow_infinity=False)
                | st.text(st.characters(exclude_categories=("Cs",))))
json_docs = st.recursive(json_scalars, lambda inner: st.lists(inner, max_size=5)
                         | st.dictionaries(st.text(st.characters(exclude_categories=("Cs",)), max_size=8),
                                           inner, max_size=5), max_leaves=25)


@settings(max_examples=300, deadline=None)
@given(json_docs)
def test_agrees_with_rfc8785_reference_package(doc):
    assert canonical_bytes(doc) == rfc8785.dumps(doc)


@settings(max_examples=300, deadline=None)
@given(json_docs)
def test_canonical_of_parsed_canonical_is_identical(doc):
    once = canonical_bytes(doc)
    assert canonical_bytes(parse(once)) == once


@settings(max_examples=200, deadline=None)
@given(st.floats(allow_nan=False, allow_infinity=False))
def test_numbers_round_trip_exactly(x):
    back = float(canonical_bytes(x).decode("ascii"))
    assert back == x or (x == 0 and back == 0)
    assert math.copysign(1, back) == 1 or x != 0


awkward_text = st.text(st.characters(exclude_categories=("Cs",)), max_size=6) | st.sampled_from(
    ["\x00", "a\x000\x00", "\U0001f600", "\ufb33", "\u20ac"])
awkward_docs = st.recursive(json_scalars | awkward_text, lambda inner: st.lists(inner, max_size=4)
                            | st.dictionaries(awkward_text, inner, max_size=4), max_leaves=20)


@settings(max_examples=300, deadline=None)
@given(awkward_docs)
def test_fast_path_equals_the_direct_serialiser(doc):
    # keys beyond the BMP and NUL characters force the direct path; both must give the same bytes
    assert canonical_bytes(doc) == _slow_canonical(doc) == rfc8785.dumps(doc)


def test_numpy_floats_format_as_plain_numbers():
    import numpy as np

    assert canonical_bytes({"p": np.float64(0.25), "q": [np.float64(1e21)]}) == b'{"p":0.25,"q":[1e+21]}'
    with pytest.raises(ValidationError):  # not a float subclass: refused rather than guessed
        canonical_bytes({"q": np.float32(0.5)})


# ------------------------------------------------------------------ json_ready (the one JSON cleaner)
def test_json_ready_null_mode_keeps_shape_and_nulls_what_cannot_be_stored():
    import numpy as np

    from casefile.canonical import json_ready

    # 2**53 + 1 is the first integer an IEEE 754 double cannot hold (IEEE 754-2008, binary64: 53-bit
    # significand); NaN and infinities have no JSON form (RFC 8259 section 6)
    value = {"a": np.float32(0.5), "b": (1, float("nan")), 3: np.int64(7), "c": np.bool_(True),
             "d": 2**53 + 1, "e": None, "f": object()}
    out = json_ready(value)
    assert out == {"a": 0.5, "b": [1, None], "3": 7, "c": True, "d": None, "e": None, "f": None}
    assert type(out["a"]) is float and type(out["3"]) is int and type(out["c"]) is bool
    canonical_bytes(out)  # everything left can be made canonical


def test_json_ready_drop_mode_leaves_out_what_cannot_be_stored_exactly():
    from casefile.canonical import json_ready

    value = {"ok": 1.5, "nan": float("inf"), "none": None, "lst": [1, float("nan")], "good": [1, 2],
             "nested": {"x": object(), "y": "s"}}
    assert json_ready(value, on_bad="drop") == {"ok": 1.5, "good": [1, 2], "nested": {"y": "s"}}
    assert json_ready(float("nan"), on_bad="drop") is None
    with pytest.raises(ValueError):
        json_ready(1, on_bad="keep")


@given(st.recursive(st.none() | st.booleans() | st.integers() | st.floats() | st.text(),
                    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(), inner, max_size=4),
                    max_leaves=20))
@settings(max_examples=200, deadline=None)
def test_json_ready_output_is_always_canonical(value):
    from casefile.canonical import json_ready

    for mode in ("null", "drop"):
        out = json_ready(value, on_bad=mode)
        assert parse(canonical_bytes(out)) == out  # the RFC 8785 form reads back as the same value
