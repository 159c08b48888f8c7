"""Sanity checks on trained tiny models: each must be able to pass and to fail.

Outside sources: Adebayo et al. 2018 (model-randomisation test), Petsiuk et al. 2018 / Samek et al.
2017 (deletion: removing the most-attributed pixels first must hurt most, from memory), and the check
thresholds' reasons in casefile/explain/checks.py (common practice, as cited there).
"""

from __future__ import annotations

import numpy as np
import pytest
import torch
from scipy.ndimage import sobel

from casefile.explain import checks as ck
from casefile.explain import gradcam

from .conftest import ROI, TinyNet, picture

LAYER = "features.5"


def edge_map(_module: torch.nn.Module, x: torch.Tensor, _target: int) -> np.ndarray:
    """A pseudo-explanation that ignores the model: the Sobel edge magnitude of the input."""
    img = x[0, 0].numpy().astype(np.float64)
    return np.hypot(sobel(img, 0), sobel(img, 1)).astype(np.float32)


def cam_fn(module: torch.nn.Module, x: torch.Tensor, target: int) -> np.ndarray:
    return gradcam(module, x, target, layer=LAYER)


def test_randomisation_fails_an_edge_map_and_passes_gradcam(object_net, test_picture) -> None:
    # Adebayo et al. 2018: edge-detector-like maps do not change under model randomisation (|rho| ~ 1).
    edge = ck.randomisation(object_net, test_picture, 1, edge_map)
    assert edge.outcome == "fail" and edge.value == pytest.approx(1.0)
    good = ck.randomisation(object_net, test_picture, 1, cam_fn)
    assert good.outcome == "pass" and good.value < 0.5, good.meaning
    assert "per step" in good.meaning


def test_randomisation_layers_are_head_first() -> None:
    names = [n for n, _ in ck.top_layers(TinyNet())]
    assert names == ["head", "features.4", "features.1", "features.0"]


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_region_focus_fails_a_marker_reader_and_passes_an_object_reader(object_net, marker_net, seed) -> None:
    # A model trained where a corner marker predicts the label puts its attribution on the marker
    # (the shortcut the check exists to catch); a model trained on the bar, shown its own kind of
    # picture, keeps it inside the region. Thresholds: CHECK_DEFAULTS (fail < 0.6, pass >= 0.8).
    rng = np.random.default_rng(700 + seed)
    with_marker = torch.from_numpy(picture(rng, seed % 2, True))[None]
    marker = ck.region_focus(gradcam(marker_net, with_marker, 1, layer=LAYER), ROI)
    assert marker.outcome == "fail" and marker.value < 0.6, marker.meaning
    plain = torch.from_numpy(picture(rng, seed % 2, False))[None]
    obj = ck.region_focus(gradcam(object_net, plain, seed % 2, layer=LAYER), ROI)
    assert obj.outcome == "pass" and obj.value >= 0.8, obj.meaning


def test_region_focus_not_run_without_roi_or_attribution() -> None:
    assert ck.region_focus(np.ones((4, 4)), None).outcome == "not-run"
    assert ck.region_focus(np.zeros((4, 4)), np.ones((4, 4), bool)).outcome == "not-run"


def test_deletion_passes_gradcam_and_fails_a_background_map(object_net, test_picture) -> None:
    cam = gradcam(object_net, test_picture, 1, layer=LAYER)
    good = ck.deletion(object_net, test_picture, 1, cam, fill="mean")
    assert good.outcome == "pass" and good.value > 0.693, good.meaning
    # The reverse ranking points at the empty background: covering it moves the score less than random blocks.
    bad = ck.deletion(object_net, test_picture, 1, -cam, fill="mean")
    assert bad.outcome == "fail" and bad.value <= 0, bad.meaning


def test_method_agreement_pass_warn_and_flat() -> None:
    rng = np.random.default_rng(0)
    a = rng.random((32, 32))
    assert ck.method_agreement(a, a + 0.01 * rng.random((32, 32)), grid=(8, 8)).outcome == "pass"
    assert ck.method_agreement(a, -a, grid=(8, 8)).outcome == "warn"  # low agreement warns, never fails
    assert ck.method_agreement(np.zeros((32, 32)), a, grid=(8, 8)).outcome == "not-run"


def test_confidence_and_margin() -> None:
    # Thresholds: CHECK_DEFAULTS (0.6 top probability, 0.1 margin), common practice for triage.
    assert ck.confidence(np.array([0.62, 0.33, 0.05]), 0).outcome == "pass"
    assert ck.confidence(np.array([0.50, 0.30, 0.20]), 0).outcome == "warn"  # unsure, clear leader
    assert ck.confidence(np.array([0.65, 0.0, 0.35]), 0).outcome == "pass"
    # a runner-up within 0.1 fails: the two leading labels cannot be told apart
    assert ck.confidence(np.array([0.50, 0.45, 0.05]), 0).outcome == "fail"
    assert ck.confidence(np.array([0.52, 0.48]), 0, settings={"confidence_warn": 0.5}).outcome == "fail"
    assert ck.confidence(np.array([0.52, 0.48]), 0,
                         settings={"confidence_warn": 0.5, "confidence_margin": 0.02}).outcome == "pass"


def test_numerical_names_what_is_not_finite() -> None:
    c = ck.numerical(
        {"logits": torch.tensor([[1.0, float("nan")]]), "map gradcam": np.array([[np.inf, 0.0]])}
    )
    assert c.outcome == "fail" and c.value == 2.0
    assert "logits (1 NaN" in c.meaning and "map gradcam (0 NaN, 1 infinite" in c.meaning
    assert ck.numerical({"logits": np.zeros(3)}).outcome == "pass"


def test_checks_with_non_finite_maps_do_not_raise(object_net, test_picture) -> None:
    bad = np.full((32, 32), np.nan, dtype=np.float32)
    assert ck.region_focus(bad, ROI).outcome == "not-run"
    assert ck.deletion(object_net, test_picture, 1, bad).outcome == "not-run"
    assert ck.method_agreement(bad, bad, grid=(4, 4)).outcome == "not-run"
    assert ck.randomisation(object_net, test_picture, 1, cam_fn, original=bad).outcome == "not-run"
    assert ck.Check("x", float("nan"), 1.0, "not-run", "m").to_dict()["value"] is None
