"""A card pinned to its weights: refusal of any other model file, and `pin_card` writing the pin.

Outside sources: SHA-256 (FIPS 180-4) through Python's hashlib for every digest; json (standard
library) to read the rewritten card back. The refusal wording is ours.
"""

from __future__ import annotations

import hashlib
import json
import os
import stat

import pytest
import torch

from casefile.errors import ModelError
from casefile.models import load_model, pin_card, read_card
from demo_cases.nets import tiny_net
from tests.models.conftest import TRUSTED, card_dict, write_card


def _sha(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


@pytest.fixture()
def other_weights(tiny, tmp_path):
    """Weights of the same shape but other values: a model the card does not describe."""
    torch.manual_seed(99)
    path = tmp_path / "other.pt"
    torch.save(tiny_net(width=2).state_dict(), path)
    return path


def _card(tmp_path, tiny, **over):
    return write_card(tmp_path / "card.json", weights=str(tiny["weights"]), **over)


def test_a_pinned_card_refuses_other_weights_naming_both_digests(tiny, tmp_path, other_weights):
    card = _card(tmp_path, tiny, weights_sha256=_sha(tiny["weights"]))
    good = load_model(tiny["weights"], card, trusted_entry_points=TRUSTED)
    assert good.weights_pinned
    with pytest.raises(ModelError) as info:
        load_model(other_weights, card, trusted_entry_points=TRUSTED)
    msg = str(info.value)
    assert msg == (f"other.pt: SHA-256 {_sha(other_weights)} does not match the card card.json's weights_sha256 "
                   f"{_sha(tiny['weights'])}; this is not the model the card describes")


@pytest.mark.parametrize("form", ["pt2", "ts"])
def test_archives_and_torchscript_are_pinned_by_their_file(tiny, tmp_path, form):
    card = _card(tmp_path, tiny, weights_sha256=_sha(tiny[form]).upper())  # hex digits in either case
    assert load_model(tiny[form], card).weights_pinned
    with pytest.raises(ModelError, match="does not match"):
        load_model(tiny["pt2" if form == "ts" else "ts"], card)


def test_an_entry_point_is_pinned_by_the_cards_weights_before_it_is_imported(tiny, tmp_path):
    card = _card(tmp_path, tiny, weights_sha256="0" * 64)
    # not even trusted: the digest is compared first, so nothing is imported for a wrong file
    with pytest.raises(ModelError, match="does not match"):
        load_model("demo_cases.nets:tiny_net", card)


def test_an_unpinned_card_loads_and_says_so(tiny, tmp_path):
    assert load_model(tiny["weights"], _card(tmp_path, tiny), trusted_entry_points=TRUSTED).weights_pinned is False


@pytest.mark.parametrize("bad", ["abc", "g" * 64, "0" * 63])
def test_a_malformed_pin_is_refused_by_the_card_schema(tmp_path, bad):
    with pytest.raises(ModelError, match="weights_sha256"):
        read_card(write_card(tmp_path / "c.json", weights_sha256=bad))


def test_pin_card_writes_the_digest_keeping_order_layout_and_mode(tiny, tmp_path):
    card = tmp_path / "card.json"
    original = {**card_dict(), "weights": str(tiny["weights"])}
    card.write_text(json.dumps(original, indent=4) + "\n")
    os.chmod(card, 0o640)
    result = pin_card(card, tiny["weights"], trusted_entry_points=TRUSTED)
    assert result.changed and result.previous is None and result.digest == _sha(tiny["weights"])
    text = card.read_text()
    pinned = json.loads(text)
    assert list(pinned) == [*original][: list(original).index("weights") + 1] + ["weights_sha256"] + \
        [*original][list(original).index("weights") + 1:]  # right after "weights", the rest in order
    assert {k: v for k, v in pinned.items() if k != "weights_sha256"} == original
    assert text == json.dumps(pinned, indent=4) + "\n"  # the same indentation and final newline
    assert stat.S_IMODE(card.stat().st_mode) == 0o640
    again = pin_card(card, tiny["weights"], trusted_entry_points=TRUSTED)
    assert not again.changed and card.read_text() == text


def test_pin_card_refuses_to_replace_another_pin_unless_asked(tiny, tmp_path, other_weights):
    card = _card(tmp_path, tiny)
    pin_card(card, tiny["weights"], trusted_entry_points=TRUSTED)
    before = card.read_bytes()
    with pytest.raises(ModelError) as info:
        pin_card(card, other_weights, trusted_entry_points=TRUSTED)
    assert _sha(tiny["weights"]) in str(info.value) and _sha(other_weights) in str(info.value)
    assert "--replace" in str(info.value) and card.read_bytes() == before
    done = pin_card(card, other_weights, replace=True, trusted_entry_points=TRUSTED)
    assert done.previous == _sha(tiny["weights"]) and json.loads(card.read_text())["weights_sha256"] == _sha(
        other_weights)


def test_pin_card_refuses_weights_that_do_not_fit_the_card(tiny, tmp_path):
    wider = tmp_path / "wide.pt"
    torch.save(tiny_net(width=4).state_dict(), wider)
    card = _card(tmp_path, tiny)
    before = card.read_bytes()
    with pytest.raises(ModelError, match="does not fit"):
        pin_card(card, wider, trusted_entry_points=TRUSTED)
    assert card.read_bytes() == before
