"""load_model: the three ways of loading give the same model; mismatched or broken cards are refused.

Outside sources: hashlib's SHA-256 (FIPS 180-4) for the digests; torch's own loaders (torch.load with
weights_only, torch.jit, torch.export) as the reference for what each file form holds.
"""

from __future__ import annotations

import hashlib

import pytest
import torch

from casefile.errors import ModelError
from casefile.models import load_model
from casefile.models.loading import ONE_AT_A_TIME
from demo_cases.nets import tiny_net
from tests.models.conftest import TRUSTED, write_card


def _sha(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_three_forms_give_identical_outputs(tiny):
    by_state = load_model(tiny["weights"], tiny["card"], trusted_entry_points=TRUSTED)
    by_entry = load_model("demo_cases.nets:tiny_net", tiny["card"], trusted_entry_points=TRUSTED)
    by_script = load_model(tiny["ts"], tiny["card"])
    by_export = load_model(tiny["pt2"], tiny["card"])
    x = torch.rand(1, 1, 32, 32, generator=torch.Generator().manual_seed(5))
    with torch.no_grad():
        outs = [m.module(x) for m in (by_state, by_entry, by_script, by_export)]
    for out in outs[1:]:
        # same weights, same ops on one CPU thread: bit-identical scores (common practice for eval-mode nets)
        assert torch.equal(out, outs[0])
    assert [m.source["format"] for m in (by_state, by_entry, by_script, by_export)] == [
        "entry-point", "entry-point", "torchscript", "torch.export"]
    assert all(not m.module.training for m in (by_state, by_entry, by_script, by_export))
    assert (by_state.name, by_state.version, by_state.window) == ("tiny-test", "0.0.1", "file")
    assert by_script.notes and "TorchScript" in by_script.notes[0] and not by_script.fixed_batch
    # exported from a batch-of-one example, the archive's batch is fixed at one (torch.export specialises
    # static shapes; torch documentation, "torch.export: dynamic shapes"); the model room notes it
    assert by_export.fixed_batch and by_export.notes == (ONE_AT_A_TIME,) and not by_state.fixed_batch


def test_digest_is_sha256_of_the_file_loaded(tiny):
    # reference: hashlib.sha256 of the bytes on disk (FIPS 180-4 via the standard library)
    assert load_model(tiny["ts"], tiny["card"]).digest == _sha(tiny["ts"])
    assert load_model(tiny["pt2"], tiny["card"]).digest == _sha(tiny["pt2"])
    entry = load_model("demo_cases.nets:tiny_net", tiny["card"], trusted_entry_points=TRUSTED)
    assert entry.digest == _sha(tiny["weights"])
    assert entry.source["entry_point"] == "demo_cases.nets:tiny_net"


def test_export_keeps_layer_names_for_hooks(tiny):
    m = load_model(tiny["pt2"], tiny["card"])
    seen = []
    dict(m.module.named_modules())[m.layer].register_forward_hook(lambda _m, _i, o: seen.append(o.shape))
    m.module(torch.zeros(1, 1, 32, 32))
    assert seen == [torch.Size([1, 8, 8, 8])]  # width 2 -> 4*2 channels; 32 px pooled twice -> 8x8


def test_three_labels_on_two_outputs_is_refused(tiny):
    torch.manual_seed(0)
    torch.save(tiny_net(width=2, n_classes=2).state_dict(), tiny["dir"] / "two.pt")
    card = write_card(tiny["dir"] / "card3.json", labels=["a", "b", "c"], weights="two.pt",
                      entry_point_args={"width": 2, "n_classes": 2})
    with pytest.raises(ModelError) as err:
        load_model("demo_cases.nets:tiny_net", card, trusted_entry_points=TRUSTED)
    assert str(err.value) == "card3.json: card lists 3 labels but the model gives 2 outputs"


def test_missing_layer_is_refused(tiny):
    card = write_card(tiny["dir"] / "bad_layer.json", layer="features.block9")
    with pytest.raises(ModelError, match=r"^bad_layer.json: card names layer 'features.block9' but the model has no"):
        load_model(tiny["weights"], card, trusted_entry_points=TRUSTED)


def test_layer_without_feature_map_is_refused(tiny):
    card = write_card(tiny["dir"] / "flat_layer.json", layer="head")
    with pytest.raises(ModelError, match=r"layer 'head' gives \[1, 4\], not a 4-D"):
        load_model(tiny["pt2"], card)


def test_wrong_input_shape_is_refused(tiny):
    card = write_card(tiny["dir"] / "rgb.json", input={"width": 32, "height": 32, "channels": 3},
                      normalisation={"mean": [0.5] * 3, "std": [0.25] * 3})
    with pytest.raises(ModelError, match=r"^rgb.json: the model fails on a \[1, 3, 32, 32\] input"):
        load_model(tiny["ts"], card)


def test_state_dict_that_does_not_fit_is_refused(tiny):
    card = write_card(tiny["dir"] / "wide.json", entry_point_args={"width": 3})
    with pytest.raises(ModelError, match=r"^tiny.pt: state dict does not fit demo_cases.nets:tiny_net"):
        load_model(tiny["weights"], card, trusted_entry_points=TRUSTED)


@pytest.mark.parametrize(
    ("model", "expected"),
    [
        ("nosuch_pkg.mod:make", r"cannot import 'nosuch_pkg.mod'"),
        ("demo_cases.nets:no_factory", r"has no callable 'no_factory'"),
        ("missing.ts", r"^missing.ts: model file not found"),
    ],
)
def test_bad_model_paths_give_one_line_errors(tiny, model, expected):
    path = model if ":" in model else tiny["dir"] / model
    with pytest.raises(ModelError, match=expected) as err:
        load_model(path, tiny["card"], trusted_entry_points=["nosuch_pkg", "demo_cases.nets"])
    assert "\n" not in str(err.value)


def test_garbage_file_is_refused(tiny):
    junk = tiny["dir"] / "junk.pt2"
    junk.write_bytes(b"not an archive at all")
    with pytest.raises(ModelError, match=r"^junk.pt2: not a readable torch.export archive"):
        load_model(junk, tiny["card"])
    junk2 = tiny["dir"] / "junk.bin"
    junk2.write_bytes(b"\x00" * 64)
    with pytest.raises(ModelError, match=r"^junk.bin: not a loadable state dict"):
        load_model(junk2, tiny["card"], trusted_entry_points=TRUSTED)


def test_entry_point_needs_weights(tiny):
    card = write_card(tiny["dir"] / "noweights.json")
    text = card.read_text().replace('"weights": "tiny.pt"', '"notes": "no weights"')
    card.write_text(text)
    with pytest.raises(ModelError, match=r"^noweights.json: entry point .* needs a 'weights'"):
        load_model("demo_cases.nets:tiny_net", card, trusted_entry_points=TRUSTED)


def test_pickled_whole_module_is_refused(tiny):
    # weights_only=True refuses arbitrary pickles (torch.load documentation): only tensors and containers
    torch.save(tiny_net(width=2), tiny["dir"] / "whole.pt")
    with pytest.raises(ModelError, match=r"^whole.pt: not a loadable state dict .*save module.state_dict"):
        load_model(tiny["dir"] / "whole.pt", tiny["card"], trusted_entry_points=TRUSTED)
