"""Model cards: schema validity, one-line refusals naming file and field, and the canonical digest.

Outside sources: jsonschema's meta-schema check (JSON Schema 2020-12), the rfc8785 package (RFC 8785)
with hashlib for the card digest, RFC 8259 section 8.1 (a byte-order mark is not JSON).
"""

from __future__ import annotations

import hashlib
import json

import pytest
import rfc8785
from hypothesis import given, settings
from hypothesis import strategies as st
from jsonschema import Draft202012Validator

from casefile.errors import ModelError
from casefile.models import card_digest, read_card
from casefile.models.card import SCHEMA_PATH
from tests.models.conftest import card_dict, write_card


def test_schema_is_valid_draft_2020_12():
    # reference: jsonschema's own meta-schema check for JSON Schema draft 2020-12
    meta = Draft202012Validator(Draft202012Validator.META_SCHEMA)
    assert [e.message for e in meta.iter_errors(json.loads(SCHEMA_PATH.read_text()))] == []


def test_good_card_reads(tmp_path):
    card = read_card(write_card(tmp_path / "card.json"))
    assert card["labels"] == ["sound", "porosity", "shrinkage", "crack"]


@pytest.mark.parametrize(
    ("change", "expected"),
    [
        ({"labels": None}, r"^bad.json: field labels is missing \(required\)$"),
        ({"input": {"width": 32, "channels": 1}}, r"^bad.json: field input.height is missing \(required\)$"),
        ({"labels": ["only"]}, r"^bad.json: field labels: "),
        ({"input": {"width": 32, "height": 32, "channels": 2}}, r"^bad.json: field input.channels: "),
        ({"normalisation": {"mean": [0.5, 0.5], "std": [0.2, 0.2]}},
         r"^bad.json: field normalisation.mean has 2 value\(s\) but input.channels is 1"),
        ({"normalisation": {"mean": [0.5], "std": [0.0]}}, r"^bad.json: field normalisation.std.0: "),
        ({"windowing": {"center": 40, "width": 0.5}}, r"^bad.json: field windowing.width must be >= 1"),
        ({"windowing": "auto"}, r"^bad.json: field windowing"),
        ({"roi": {"rule": "border", "pixels": 16}}, r"^bad.json: field roi.pixels: a border of 16 px"),
        ({"roi": {"rule": "rect", "x0": 4, "y0": 4, "x1": 40, "y1": 20}}, r"^bad.json: field roi: rectangle"),
        ({"roi": {"rule": "circle"}}, r"^bad.json: field roi"),
        ({"labels": ["a", "a"]}, r"^bad.json: field labels: .*non-unique"),
    ],
)
def test_bad_cards_are_refused_naming_the_field(tmp_path, change, expected):
    card = card_dict(**change)
    card = {k: v for k, v in card.items() if v is not None}
    path = tmp_path / "bad.json"
    path.write_text(json.dumps(card))
    with pytest.raises(ModelError, match=expected) as err:
        read_card(path)
    assert "\n" not in str(err.value)


def test_not_json_and_not_finite(tmp_path):
    path = tmp_path / "broken.json"
    path.write_text("{ not json")
    with pytest.raises(ModelError, match=r"^broken.json: model card is not valid JSON \(line 1"):
        read_card(path)
    path.write_text(json.dumps(card_dict()).replace('"mean": [0.5]', '"mean": [NaN]'))
    with pytest.raises(ModelError, match=r"^broken.json: field normalisation.mean.0 is not a finite number"):
        read_card(path)
    with pytest.raises(ModelError, match=r"^absent.json: model card not found"):
        read_card(tmp_path / "absent.json")


def test_card_digest_is_rfc8785_sha256_and_ignores_layout(tmp_path):
    card = card_dict()
    # reference: the rfc8785 package (JSON Canonicalization Scheme, RFC 8785) + hashlib
    assert card_digest(card) == hashlib.sha256(rfc8785.dumps(card)).hexdigest()
    shuffled = dict(reversed(list(card.items())))
    p1, p2 = tmp_path / "a.json", tmp_path / "b.json"
    p1.write_text(json.dumps(card, indent=4))
    p2.write_text(json.dumps(shuffled, separators=(",", ":")))
    assert card_digest(read_card(p1)) == card_digest(read_card(p2))
    assert card_digest({**card, "version": "0.0.2"}) != card_digest(card)


_json = st.recursive(
    st.none() | st.booleans() | st.integers(-5, 5000) | st.floats(allow_nan=False) | st.text(max_size=5),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=5), inner, max_size=3),
    max_leaves=6,
)


@settings(max_examples=60, deadline=None)
@given(field=st.sampled_from(sorted(card_dict())), value=_json)
def test_any_wrong_value_gives_a_one_line_model_error(tmp_path_factory, field, value):
    path = tmp_path_factory.mktemp("fuzz") / "fuzz.json"
    path.write_text(json.dumps({**card_dict(), field: value}))
    try:
        read_card(path)
    except ModelError as exc:
        assert str(exc).startswith("fuzz.json: ") and "\n" not in str(exc)


@pytest.mark.parametrize(("text", "expected"), [
    ("[" * 100_000 + "]" * 100_000, "model card nests too deeply to be a card"),  # Python's json recursion limit
    ('{"notes": "' + "x" * 300_000 + '"}', "model card is larger than 256 KiB"),
    ("\ufeff{}", "model card is not valid JSON"),  # a byte-order mark is not JSON (RFC 8259 section 8.1)
])
def test_hostile_card_files_give_one_line(tmp_path, text, expected):
    path = tmp_path / "odd.json"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(ModelError) as err:
        read_card(path)
    assert str(err.value).startswith(f"odd.json: {expected}") and "\n" not in str(err.value)
