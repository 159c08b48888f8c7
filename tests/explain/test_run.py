"""explain.run end to end: record shape, finite numbers, worst-outcome status, robustness to NaN and flat maps.

Outside sources: RFC 8259 (JSON has no NaN or infinities: json.dumps(allow_nan=False) as the
reference) and the occlusion grid arithmetic; the record shape is casefile's own contract (DEVELOPERS.md).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import torch

from casefile.errors import ExplainError
from casefile.explain import DEFAULT_SETTINGS, run
from casefile.flags import worst

from .conftest import ROI, TinyNet

SMALL = {"occlusion_patch": 8, "occlusion_stride": 4}


def test_run_on_trained_model_gives_a_full_record(object_net, test_picture) -> None:
    e = run(
        object_net, test_picture, labels=["lying", "upright"], layer="features.5", settings=SMALL, roi=ROI
    )
    assert e.label == "upright" and e.label_index == 1 and e.target_source == "predicted"
    assert sum(e.scores.values()) == pytest.approx(1.0)
    assert set(e.maps) == {"gradcam", "occlusion", "gradient"}
    assert all(m.shape == (32, 32) and m.dtype == np.float32 for m in e.maps.values())
    assert e.map_params["occlusion"]["grid"] == [7, 7]  # (32 - 8) / 4 + 1 positions per axis
    names = [c.name for c in e.checks]
    assert names == [
        "numerical",
        "confidence",
        "randomisation",
        "method_agreement",
        "deletion",
        "region_focus",
    ]
    assert e.status == worst([c.outcome for c in e.checks])
    rec = e.to_record()
    text = json.dumps(rec, allow_nan=False)  # every float finite, no arrays
    assert "maps" in rec and "shape" in text and rec["settings"] == {**DEFAULT_SETTINGS, **SMALL}
    assert set(rec["versions"]) >= {"torch", "numpy", "scipy"}
    assert len(e.map_bytes("gradcam")) == 32 * 32 * 4


def test_worst_outcome_rule() -> None:
    assert worst(["pass", "not-run", "warn"]) == "warn"
    assert worst(["pass", "fail", "warn"]) == "fail"
    assert worst(["pass", "not-run"]) == "pass"
    assert worst(["not-run", "not-run"]) == "not-run"


def test_nan_output_fails_numerical_check_without_crashing() -> None:
    torch.manual_seed(0)
    net = TinyNet().eval()
    with torch.no_grad():
        net.head.bias[0] = float("nan")
    e = run(net, torch.randn(1, 1, 32, 32), labels=["a", "b"], layer="features.5", settings=SMALL, roi=ROI)
    num = e.checks[0]
    assert num.name == "numerical" and num.outcome == "fail"
    assert "logits (1 NaN" in num.meaning and e.status == "fail"
    rec = e.to_record()
    json.dumps(rec, allow_nan=False)
    assert rec["scores"]["a"] is None


def test_flat_gradcam_map_gives_not_run_not_nan() -> None:
    # Features after ReLU are >= 0; with every head weight negative, Grad-CAM = ReLU(negative) = 0.
    torch.manual_seed(1)
    net = TinyNet().eval()
    with torch.no_grad():
        net.head.weight.copy_(-net.head.weight.abs())
    e = run(net, torch.randn(1, 1, 32, 32), labels=["a", "b"], layer="features.5", settings=SMALL, roi=ROI)
    assert float(e.maps["gradcam"].max()) == 0.0
    by_name = {c.name: c for c in e.checks}
    for name in ("randomisation", "deletion", "region_focus", "method_agreement"):
        assert by_name[name].outcome == "not-run", by_name[name]
        assert by_name[name].value is None and by_name[name].meaning
    json.dumps(e.to_record(), allow_nan=False)


def test_run_rejects_bad_arguments_with_one_line_errors(object_net, test_picture) -> None:
    kw = {"labels": ["a", "b"], "layer": "features.5"}
    with pytest.raises(ExplainError, match="settings: unknown key 'patch'"):
        run(object_net, test_picture, settings={"patch": 3}, **kw)
    with pytest.raises(ExplainError, match="labels: 3 labels given but the model outputs 2"):
        run(object_net, test_picture, labels=["a", "b", "c"], layer="features.5")
    with pytest.raises(ExplainError, match="roi mask: shape"):
        run(object_net, test_picture, roi=np.ones((8, 8), bool), **kw)
    with pytest.raises(ExplainError, match="methods"):
        run(object_net, test_picture, methods=("lime",), **kw)


def test_run_with_given_target_and_one_method(object_net, test_picture) -> None:
    e = run(object_net, test_picture, target=0, labels=["a", "b"], layer="features.5", methods=("gradient",))
    assert e.label_index == 0 and e.target_source == "given" and list(e.maps) == ["gradient"]
    by_name = {c.name: c for c in e.checks}
    assert by_name["method_agreement"].outcome == "not-run" and by_name["region_focus"].outcome == "not-run"
    assert by_name["randomisation"].meaning.startswith("gradient:")


def test_model_that_fails_on_the_input_gives_one_line_error(object_net) -> None:
    # A 3-channel picture given to a 1-channel model: the model's own error is reported in one line.
    with pytest.raises(
        ExplainError, match=r"model: forward pass failed on an input of shape \[1, 3, 32, 32\]"
    ) as info:
        run(object_net, torch.zeros(1, 3, 32, 32), labels=["a", "b"], layer="features.5")
    assert "\n" not in str(info.value)


def test_nan_in_the_input_is_named(object_net, test_picture) -> None:
    x = test_picture.clone()
    x[0, 0, 3, 3] = float("nan")
    e = run(object_net, x, labels=["a", "b"], layer="features.5", methods=("gradcam",))
    assert e.checks[0].outcome == "fail" and "input (1 NaN" in e.checks[0].meaning


@pytest.mark.filterwarnings("ignore::FutureWarning", "ignore::DeprecationWarning")
def test_exported_fixed_batch_model_and_torchscript() -> None:
    # torch.export with a static batch of one refuses batches: occlusion and deletion fall back to one at a time.
    torch.manual_seed(2)
    net = TinyNet().eval()
    x = torch.randn(1, 1, 32, 32)
    exported = torch.export.unflatten(torch.export.export(net, (x,)))
    before = {k: v.clone() for k, v in exported.state_dict().items()}
    e = run(exported, x, labels=["a", "b"], layer="features.5", settings=SMALL)
    assert e.map_params["occlusion"]["batch_size_used"] == 1
    np.testing.assert_array_equal(
        e.maps["gradcam"], run(net, x, labels=["a", "b"], layer="features.5").maps["gradcam"]
    )
    assert {c.name: c.outcome for c in e.checks}["randomisation"] != "not-run"
    assert all(torch.equal(before[k], v) for k, v in exported.state_dict().items())
    scripted = torch.jit.script(net)
    with pytest.raises(ExplainError, match="TorchScript modules do not allow"):
        run(scripted, x, labels=["a", "b"], layer="features.5")
    assert run(scripted, x, labels=["a", "b"], layer=None, methods=("gradient",)).maps["gradient"].shape == (
        32,
        32,
    )


class Uncopyable(TinyNet):
    def __deepcopy__(self, memo: dict) -> TinyNet:
        raise RuntimeError("cannot copy")


def test_randomisation_in_place_fallback_restores_parameters_exactly() -> None:
    from casefile.explain import checks as ck
    from casefile.explain import gradcam

    torch.manual_seed(3)
    net = Uncopyable().eval()
    x = torch.randn(1, 1, 32, 32)
    before = {k: v.clone() for k, v in net.state_dict().items()}
    c = ck.randomisation(net, x, 0, lambda m, xx, t: gradcam(m, xx, t, layer="features.5"))
    assert c.outcome in {"pass", "warn", "fail"} and c.value is not None
    assert all(torch.equal(before[k], v) for k, v in net.state_dict().items())
