"""Preprocessing from the card: channel conversion, resize, normalisation and the ROI mask.

Outside sources: ITU-R BT.601-7 section 2.5.1 (luma weights), Pillow's BILINEAR resize as the
reference for antialiased resizing, and hand computation of the normalisation.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest
import torch
from hypothesis import given, settings
from hypothesis import strategies as st
from PIL import Image

from casefile.errors import InputError
from casefile.models import load_model
from demo_cases.nets import tiny_net
from tests.models.conftest import TRUSTED, write_card


@dataclass
class FakeScan:
    """Stand-in for casefile.imaging.Scan: only .pixels ([C, H, W] float32 0..1) and .file_name."""

    pixels: np.ndarray
    file_name: str = "fake.png"


@pytest.fixture(scope="module")
def grey(tiny):
    return load_model(tiny["pt2"], tiny["card"])


def test_normalisation_matches_hand_computation(grey):
    x = grey.preprocess(FakeScan(np.full((1, 32, 32), 0.6, np.float32)))
    assert x.shape == (1, 1, 32, 32) and x.dtype == torch.float32
    # card: mean 0.5, std 0.25 -> (0.6 - 0.5) / 0.25 = 0.4 (hand computation)
    assert torch.allclose(x, torch.full_like(x, 0.4), atol=1e-6)


def test_colour_to_grey_uses_bt601_luma(grey):
    rgb = np.zeros((3, 32, 32), np.float32)
    rgb[0, :, :10], rgb[1, :, 10:20], rgb[2, :, 20:] = 1.0, 1.0, 1.0
    x = grey.preprocess(FakeScan(rgb))[0, 0]
    # ITU-R BT.601-7 section 2.5.1: Y = 0.299 R + 0.587 G + 0.114 B; then (Y - 0.5) / 0.25
    assert x[5, 5].item() == pytest.approx((0.299 - 0.5) / 0.25, abs=1e-6)
    assert x[5, 15].item() == pytest.approx((0.587 - 0.5) / 0.25, abs=1e-6)
    assert x[5, 25].item() == pytest.approx((0.114 - 0.5) / 0.25, abs=1e-6)
    assert grey.preprocessing_record(FakeScan(rgb))["applied"]["channels"] == "colour-to-grey: ITU-R BT.601 luma"


def test_grey_to_colour_repeats_and_normalises_per_channel(tiny):
    # per-channel mean/std often used for colour networks (common practice, values from memory)
    mean, std = [0.485, 0.456, 0.406], [0.229, 0.224, 0.225]
    card = write_card(tiny["dir"] / "rgb_card.json", input={"width": 16, "height": 16, "channels": 3},
                      normalisation={"mean": mean, "std": std}, entry_point_args={"width": 2, "in_channels": 3},
                      weights="tiny3.pt")
    torch.manual_seed(1)
    torch.save(tiny_net(width=2, in_channels=3).state_dict(), tiny["dir"] / "tiny3.pt")
    m = load_model("demo_cases.nets:tiny_net", card, trusted_entry_points=TRUSTED)
    x = m.preprocess(FakeScan(np.full((1, 16, 16), 0.5, np.float32)))
    assert x.shape == (1, 3, 16, 16)
    for c in range(3):
        assert x[0, c, 0, 0].item() == pytest.approx((0.5 - mean[c]) / std[c], abs=1e-6)


def test_resize_matches_pillow_antialiased_bilinear(grey):
    rng = np.random.default_rng(0)
    src = rng.random((64, 48), dtype=np.float32)
    x = grey.preprocess(FakeScan(src[None]))[0, 0].numpy() * 0.25 + 0.5
    # reference: Pillow's BILINEAR resize (an antialiased triangle filter), which torch's antialias=True follows
    ref = np.asarray(Image.fromarray(src, mode="F").resize((32, 32), Image.Resampling.BILINEAR))
    assert np.abs(x - ref).max() < 1e-4
    assert grey.preprocessing_record(FakeScan(src[None]))["applied"]["resize"] == "from 64x48"


def test_same_size_is_not_resampled(grey):
    src = np.random.default_rng(1).random((1, 32, 32), dtype=np.float32)
    x = grey.preprocess(FakeScan(src))
    assert torch.allclose(x * 0.25 + 0.5, torch.from_numpy(src)[None], atol=1e-6)


def test_record_says_what_is_applied(grey):
    rec = grey.preprocessing_record()
    assert rec["normalisation"] == {"mean": [0.5], "std": [0.25], "formula": "(x - mean) / std"}
    assert rec["channel_rule"]["luma_weights"] == [0.299, 0.587, 0.114]
    assert rec["resize"]["mode"] == "bilinear" and rec["resize"]["antialias"] is True
    assert rec["input"] == {"channels": 1, "height": 32, "width": 32}


def test_bad_pixels_give_input_error(grey):
    with pytest.raises(InputError, match=r"^fake.png: pixels must be \[C, H, W\]"):
        grey.preprocess(FakeScan(np.zeros((32, 32), np.float32)))
    with pytest.raises(InputError, match=r"^fake.png: pixels contain NaN"):
        grey.preprocess(FakeScan(np.full((1, 8, 8), np.nan, np.float32)))


def test_roi_masks(grey, tiny):
    mask = grey.roi_mask(32, 32)  # card: border of 4 px at 32x32
    assert mask.dtype == bool and mask.sum() == 24 * 24 and not mask[3, 10] and mask[4, 4]
    assert grey.roi_mask(64, 64).sum() == 48 * 48  # scaled: 8 px at 64x64
    rect = load_model(tiny["pt2"], write_card(tiny["dir"] / "rect.json",
                                              roi={"rule": "rect", "x0": 2, "y0": 5, "x1": 10, "y1": 7}))
    m = rect.roi_mask(32, 32)
    assert m.sum() == 8 * 2 and m[5, 2] and m[6, 9] and not m[7, 9] and not m[5, 10]
    whole = load_model(tiny["pt2"], write_card(tiny["dir"] / "whole.json", roi={"rule": "whole"}))
    assert whole.roi_mask(32, 32) is None


@settings(max_examples=15, deadline=None)
@given(h=st.integers(8, 80), w=st.integers(8, 80), v=st.floats(0.0, 1.0))
def test_constant_picture_stays_constant_at_any_size(grey, h, w, v):
    # resampling a constant picture with normalised weights returns the same constant (common practice)
    x = grey.preprocess(FakeScan(np.full((1, h, w), v, np.float32)))
    assert x.shape == (1, 1, 32, 32)
    assert torch.allclose(x, torch.full_like(x, (np.float32(v) - 0.5) / 0.25), atol=1e-5)
