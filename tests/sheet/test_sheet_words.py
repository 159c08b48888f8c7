"""Record values in words for the sheet: map parameters, thresholds, windows, kinds, weights and flags.

The wording targets are the ones issue #10 asks for ("patch 16 px, stride 8 px, fill: blur σ 4",
"top 3 of 4 classes", "raster image", "DICOM", "Sent for a second read: region focus failed").

Outside sources: none apply to wording; the targets are the project's own (issue #10), and the recorded
values they turn into words come from casefile.explain as it records them.
"""

from __future__ import annotations

import re

from hypothesis import given, settings
from hypothesis import strategies as st

from casefile.sheet import words

PYTHON_LOOKS = re.compile(r"[{}\[\]]|\bNone\b|\bTrue\b|\bFalse\b")

# The occlusion parameters exactly as casefile.explain.run records them (keys and value types).
OCCLUSION = {"batch_size": 64, "batch_size_used": 64, "blur_sigma": None, "fill": 0, "grid": [7, 7],
             "output": "probability", "patch": 16, "patch_used": [16, 16], "stride": 8}


def test_occlusion_parameters_read_as_words_with_units():
    text = " ".join(words.params("occlusion", OCCLUSION))
    assert text.startswith("patch 16 px, stride 8 px, fill: constant 0")
    assert "grid of 7 × 7 positions" in text and "drop in class probability" in text
    assert "batch" not in text  # batching does not change the map
    assert "patch used" not in text  # the same as the patch asked for
    assert not PYTHON_LOOKS.search(text)


def test_blur_fill_names_its_sigma_given_or_by_the_documented_default():
    given_sigma = " ".join(words.params("occlusion", {**OCCLUSION, "fill": "blur", "blur_sigma": 4.0}))
    assert "patch 16 px, stride 8 px, fill: blur σ 4 px" in given_sigma
    # casefile/explain/occlusion.py: blur_sigma defaults to patch / 4 (16 / 4 = 4)
    default = " ".join(words.params("occlusion", {**OCCLUSION, "fill": "blur"}))
    assert "fill: blur σ 4 px (a quarter of the patch)" in default
    assert "fill: the picture's mean" in " ".join(words.params("occlusion", {**OCCLUSION, "fill": "mean"}))


def test_a_clipped_patch_is_shown_and_unknown_keys_are_key_value_pairs():
    text = " ".join(words.params("occlusion", {**OCCLUSION, "patch_used": [16, 12], "window_shape": [3, 5],
                                               "smooth": {"kind": "box", "size": 2.0}, "note": None, "on": True}))
    assert "patch used 16 × 12 px" in text
    assert "window shape 3 × 5" in text and "smooth (kind box, size 2)" in text
    assert "note not set" in text and "on yes" in text
    assert not PYTHON_LOOKS.search(text)


def test_approximate_maps_say_so_with_their_fidelity_setting_in_words():
    lines = words.params("occlusion", {**OCCLUSION, "exact": False, "mode": "coarse-to-fine", "fidelity": 0.25,
                                       "summary": "the rest interpolated from the coarse map"})
    text = " ".join(lines)
    assert "approximate map (coarse to fine, fidelity 0.25): the rest interpolated from the coarse map" in text
    exact = " ".join(words.params("occlusion", {**OCCLUSION, "exact": True, "mode": "incremental"}))
    assert "exact map (computed incrementally, as changes to one cached run)" in exact
    assert "approximate map (fidelity setting not recorded)" in " ".join(words.params("occlusion", {"exact": False}))
    noted = words.params("occlusion", {**OCCLUSION, "exact": True, "mode": "batched",
                                       "notes": ["plain method: the model could not be traced"]})
    assert noted[-2:] == ["exact map (one forward pass per position)",
                          "plain method: the model could not be traced"]


def test_gradcam_and_gradient_parameters():
    assert words.params("gradcam", {"layer": "features.block3"}) == ["layer features.block3"]
    assert words.params("gradient", {"value": "max over channels of |d logit / d pixel|"}) == [
        "value: max over channels of |d logit / d pixel|"]
    assert words.params("gradient", {}) == ["no parameters recorded"]
    assert words.params("gradient", None) == ["no parameters recorded"]


def test_thresholds_and_numbers():
    assert words.threshold(0.693) == "0.693"
    assert words.threshold({"pass": 0.5, "fail": 0.7}) == "pass 0.5, fail 0.7"
    assert words.threshold(None) == "—"
    assert words.number(17.3) == "17.3" and words.number(0.0) == "0" and words.number(4096) == "4096"
    assert words.number(0.2771491546951897) == "0.277"
    assert words.number(True) == "yes"
    assert words.number(2.5454210117459297e-07) == "2.55 × 10⁻⁷" and words.number(3e20) == "3 × 10²⁰"
    assert words.number(float("nan")) == "not a number"


def test_windows_in_words():
    w = {"center": 2048, "function": "LINEAR", "source": "file", "width": 4096}
    assert words.window(w) == "window centre 2048, width 4096, linear (from the file)"
    assert words.window(None) == "no window (shown as stored)"
    lut = words.window({"source": "file-lut", "lut_entries": 4096, "lut_first": 0})
    assert lut.startswith("window: the file's VOI LUT") and not PYTHON_LOOKS.search(lut)


def test_input_kinds():
    assert words.kind("dicom") == "DICOM"
    assert words.kind("raster") == "raster image"
    assert words.kind("array") == "picture from memory"


def test_weights_pinned_wording():
    assert words.weights({"weights_pinned": True}) == ("weights match the card's SHA-256", False)
    assert words.weights({"weights_pinned": False}) == ("weights not pinned by the card", True)
    assert words.weights({}) is None  # older records do not say


def _checks(flag_region: bool) -> list[dict]:
    return [{"name": "region_focus", "outcome": "fail", "flags": flag_region},
            {"name": "method_agreement", "outcome": "warn", "flags": False},
            {"name": "deletion", "outcome": "pass", "flags": False}]


def test_flag_sentences():
    sent = words.flags({"checks": _checks(True), "flagged": True, "flags": ["region_focus"]})
    assert sent == ("Sent for a second read: region focus failed; notes: method agreement warned", True)
    quiet = words.flags({"checks": _checks(False), "flagged": False, "flags": []})
    assert quiet == ("No flags; notes: region focus failed, method agreement warned", False)
    assert words.flags({"checks": [{"name": "deletion", "outcome": "pass", "flags": False}],
                        "flagged": False, "flags": []}) == ("No flags; no notes", False)
    assert words.flags({"checks": [{"name": "deletion", "outcome": "fail"}]}) is None  # older record
    assert words.check_role({"flags": True}) == "flag" and words.check_role({"flags": False}) == "note"
    assert words.check_role({}) == "—"


plain = st.recursive(st.none() | st.booleans() | st.integers(-10**9, 10**9) | st.floats(allow_nan=False)
                     | st.text(alphabet="abc xyz_-.", max_size=8),
                     lambda inner: st.lists(inner, max_size=3) | st.dictionaries(
                         st.text(alphabet="abc_", min_size=1, max_size=6), inner, max_size=3), max_leaves=8)


@settings(max_examples=60, deadline=None)
@given(st.dictionaries(st.text(alphabet="abcdefgh_", min_size=1, max_size=10), plain, max_size=6))
def test_no_params_ever_print_braces_none_or_python_booleans(p):
    for method in ("gradcam", "occlusion", "gradient", "other"):
        text = " ".join(words.params(method, p))
        assert not PYTHON_LOOKS.search(text), text
        assert not re.search(r"\de[+-]\d", text), text  # no 1e-07 style powers of ten
