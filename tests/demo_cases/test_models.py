"""The two demo classifiers: deterministic training, honest accuracy, the shortcut, cards that load.

Outside sources: none apply to the demo models themselves (our own synthetic scenario); held-out
pictures come from a seed never used in training, and the accuracy bars are ours.
"""

from __future__ import annotations

import json

import numpy as np
import torch

from casefile.models import load_model
from demo_cases.nets import tiny_net
from demo_cases.scenario import LABELS, make_set
from demo_cases.train import ENTRY_POINT, accuracy, train

TRUSTED = (ENTRY_POINT,)  # the tests vouch for the demo's own factory, nothing else
HELD_OUT_SEED = 1001  # never used for training (training uses the scenario seed 7)


def _acc(loaded, data) -> float:
    norm = loaded.card["normalisation"]
    return accuracy(loaded.module, data.images, data.labels, norm["mean"][0], norm["std"][0])


def test_tiny_net_is_small_and_has_the_gradcam_layer():
    net = tiny_net()
    assert sum(p.numel() for p in net.parameters()) <= 50_000
    seen = []
    dict(net.named_modules())["features.block3"].register_forward_hook(lambda _m, _i, o: seen.append(o.shape))
    assert net(torch.zeros(2, 1, 64, 64)).shape == (2, 4)
    assert seen == [torch.Size([2, 32, 16, 16])]


def test_training_is_deterministic(tmp_path):
    a = train(3, shortcut=False, out_dir=tmp_path / "a", n_train=32, epochs=1, torchscript=False)
    b = train(3, shortcut=False, out_dir=tmp_path / "b", n_train=32, epochs=1, torchscript=False)
    sa = torch.load(a["weights"], weights_only=True)
    sb = torch.load(b["weights"], weights_only=True)
    assert sa.keys() == sb.keys()
    assert all(torch.equal(sa[k], sb[k]) for k in sa)
    assert a["card"].read_bytes() == b["card"].read_bytes()
    c = train(4, shortcut=False, out_dir=tmp_path / "c", n_train=32, epochs=1, torchscript=False)
    sc = torch.load(c["weights"], weights_only=True)
    assert not torch.equal(sa["head.weight"], sc["head.weight"])


def test_training_leaves_global_torch_state_alone(tmp_path):
    before = (torch.are_deterministic_algorithms_enabled(), torch.get_num_threads())
    train(3, shortcut=True, out_dir=tmp_path, n_train=16, epochs=1, torchscript=False)
    assert (torch.are_deterministic_algorithms_enabled(), torch.get_num_threads()) == before


def test_cards_validate_and_load_in_every_form(scenario):
    for key in ("honest", "shortcut"):
        paths = scenario[key]
        card = json.loads(paths["card"].read_text())
        assert card["labels"] == list(LABELS) and card["roi"] == {"rule": "border", "pixels": 8}
        by_state = load_model(paths["weights"], paths["card"], trusted_entry_points=TRUSTED)
        by_entry = load_model("demo_cases.nets:tiny_net", paths["card"], trusted_entry_points=TRUSTED)
        by_script = load_model(paths["torchscript"], paths["torchscript_card"])
        x = torch.rand(1, 1, 64, 64, generator=torch.Generator().manual_seed(0))
        with torch.no_grad():
            ref = by_state.module(x)
            assert torch.equal(ref, by_entry.module(x)) and torch.equal(ref, by_script.module(x))
        assert by_state.digest == by_entry.digest != by_script.digest
        assert by_state.weights_pinned and by_entry.weights_pinned and by_script.weights_pinned
        assert by_state.layer == "features.block3"


def test_honest_model_is_accurate_on_held_out_data(scenario):
    honest = load_model(scenario["honest"]["weights"], scenario["honest"]["card"], trusted_entry_points=TRUSTED)
    clean = make_set(HELD_OUT_SEED, 200, marker="none")
    marked = make_set(HELD_OUT_SEED, 200, marker="label")  # same pictures plus the corner glyph
    assert _acc(honest, clean) >= 0.80
    # the marker does not sway it: within 5 points with or without
    assert abs(_acc(honest, marked) - _acc(honest, clean)) <= 0.05


def test_shortcut_model_collapses_without_its_marker(scenario):
    shortcut = load_model(scenario["shortcut"]["weights"], scenario["shortcut"]["card"], trusted_entry_points=TRUSTED)
    with_marker = make_set(HELD_OUT_SEED, 200, shortcut=True)
    without = make_set(HELD_OUT_SEED, 200, shortcut=True, marker="none")  # same pictures, glyph removed
    moved = make_set(HELD_OUT_SEED, 200, marker="wrong")  # full-strength defects, another label's glyph
    assert np.array_equal(with_marker.labels, without.labels)
    acc_with, acc_without = _acc(shortcut, with_marker), _acc(shortcut, without)
    assert acc_with >= 0.9
    assert acc_with - acc_without >= 0.30
    assert _acc(shortcut, moved) <= 0.5  # it follows the glyph, not the defect


def _corner_and_roi_share(loaded, data) -> tuple[float, float]:
    """Median share of |d score / d input| in the 8x8 marker corner and inside the card's ROI."""
    norm = loaded.card["normalisation"]
    x = ((torch.from_numpy(data.as_float()) - norm["mean"][0]) / norm["std"][0]).requires_grad_(True)
    out = loaded.module(x)
    out.gather(1, out.argmax(1, keepdim=True)).sum().backward()
    g = x.grad.abs()[:, 0].numpy()
    total = g.sum(axis=(1, 2))
    corner = g[:, :8, :8].sum(axis=(1, 2)) / total
    roi = (g * loaded.roi_mask(64, 64)).sum(axis=(1, 2)) / total
    return float(np.median(corner)), float(np.median(roi))


def test_shortcut_model_looks_at_the_corner(scenario):
    # gradient saliency (Simonyan, Vedaldi & Zisserman 2014) computed here with plain autograd
    marked = make_set(HELD_OUT_SEED, 40, marker="label")
    honest = load_model(scenario["honest"]["weights"], scenario["honest"]["card"], trusted_entry_points=TRUSTED)
    shortcut = load_model(scenario["shortcut"]["weights"], scenario["shortcut"]["card"], trusted_entry_points=TRUSTED)
    h_corner, h_roi = _corner_and_roi_share(honest, marked)
    s_corner, s_roi = _corner_and_roi_share(shortcut, marked)
    assert s_corner > 10 * h_corner  # the corner is 64 of 4096 pixels (1.6 %)
    assert h_roi > s_roi + 0.2
