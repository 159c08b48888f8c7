"""The colour map, overlays and PNG bytes, checked against scikit-image, the PNG format and published matrices."""

from __future__ import annotations

import io
import struct
import zlib

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from PIL import Image
from skimage.color import deltaE_ciede2000, rgb2lab

from casefile.sheet.colours import (
    CONTOUR_INK,
    apply_map,
    colour_lut,
    lab_to_srgb,
    map_picture,
    overlay,
    png_bytes,
    scale_bar,
)

# Machado, Oliveira & Fernandes 2009, "A physiologically-based model for simulation of color vision
# deficiency", IEEE TVCG 15(6): deuteranopia at severity 1.0, applied to linear sRGB (from memory).
MACHADO_DEUTAN = np.array([
    [0.367322, 0.860646, -0.227968],
    [0.280085, 0.672501, 0.047413],
    [-0.011820, 0.042940, 0.968881],
])


def _lab(rgb_u8: np.ndarray) -> np.ndarray:
    return rgb2lab(rgb_u8[None].astype(np.float64) / 255.0)[0]  # scikit-image, reference library


def test_lightness_rises_strictly_from_dark_to_light():
    lab = _lab(colour_lut())
    assert colour_lut().shape == (256, 3) and colour_lut().dtype == np.uint8
    assert np.all(np.diff(lab[:, 0]) > 0)  # monotonic lightness: the design rule of a sequential map
    assert lab[0, 0] == pytest.approx(15, abs=1.0) and lab[-1, 0] == pytest.approx(94, abs=1.0)
    # lightness is close to a straight line in the index (perceptually even steps in L*)
    line = np.linspace(lab[0, 0], lab[-1, 0], 256)
    assert np.max(np.abs(lab[:, 0] - line)) < 0.6


def test_hue_path_blue_to_yellow():
    lab = _lab(colour_lut())
    hue = np.degrees(np.arctan2(lab[:, 2], lab[:, 1])) % 360
    assert 250 < hue[0] < 300  # CIELAB hue of blues, common practice
    assert 80 < hue[-1] < 110  # CIELAB hue of yellows, common practice
    assert lab[-1, 2] > 30  # pale yellow: clearly positive b*


def test_steps_are_even_in_ciede2000():
    lab = _lab(colour_lut())
    steps = deltaE_ciede2000(lab[:-8:8], lab[8::8])  # scikit-image's CIEDE2000
    assert steps.min() > 0.45 * steps.max()  # no flat stretch, no sudden jump


def test_distinguishable_under_deuteranopia_simulation():
    srgb = colour_lut().astype(np.float64) / 255.0
    lin = np.where(srgb <= 0.04045, srgb / 12.92, ((srgb + 0.055) / 1.055) ** 2.4)  # IEC 61966-2-1
    sim = np.clip(lin @ MACHADO_DEUTAN.T, 0, 1)
    sim_srgb = np.where(sim <= 0.0031308, 12.92 * sim, 1.055 * sim ** (1 / 2.4) - 0.055)
    lab = rgb2lab(sim_srgb[None])[0]
    sub = lab[::16]  # 16 levels a reader should still tell apart
    assert np.all(np.diff(sub[:, 0]) > 2.0)
    assert deltaE_ciede2000(sub[:-1], sub[1:]).min() > 3.0  # well above 1 = just noticeable, common practice


def test_lab_to_srgb_matches_scikit_image_on_white_and_primaries():
    for rgb in ([1.0, 1.0, 1.0], [1.0, 0.0, 0.0], [0.0, 0.5, 0.0], [0.2, 0.3, 0.9]):
        lab = rgb2lab(np.array([[rgb]]))[0, 0]
        assert np.allclose(lab_to_srgb(lab), rgb, atol=2e-3)


def test_overlay_normalises_by_the_maximum_and_resizes():
    disp = np.full((40, 30), 100, np.uint8)
    m = np.zeros((10, 15), np.float32)
    m[3:6, 4:9] = 2.0
    a = overlay(disp, m)
    assert a.shape == (40, 30, 3) and a.dtype == np.uint8
    assert np.array_equal(a, overlay(disp, m * 7.5))  # scale of the map does not matter
    plain = overlay(disp, m, opacity=0.0, contours=None)
    assert np.array_equal(plain, np.repeat(disp[:, :, None], 3, axis=2))


def test_overlay_blend_and_contours():
    disp = np.zeros((32, 32), np.uint8)
    flat = overlay(disp, np.ones((8, 8), np.float32), opacity=0.5, contours=None)
    assert np.array_equal(flat[0, 0], np.round(0.5 * colour_lut()[255]).astype(np.uint8))
    m = np.zeros((32, 32), np.float32)
    m[8:24, 8:24] = 1.0
    a = overlay(disp, m, contours=(0.5,))
    assert np.array_equal(a[8, 16], CONTOUR_INK)  # the edge of the square is drawn in dark ink
    assert np.array_equal(a[7, 16], [255, 255, 255])  # edged in white outside, so it shows on dark ground
    assert not np.array_equal(a[16, 16], CONTOUR_INK)  # the inside stays a blend


def test_overlay_strength_follows_the_map_value():
    disp = np.full((20, 20), 120, np.uint8)
    m = np.zeros((20, 20), np.float32)
    m[:, 10:] = 1.0
    m[:, :5] = 0.1  # below the ramp's start: the picture shows through unchanged
    m[:, 5:10] = 0.375  # half way up the ramp (0.15 to 0.6): half the opacity
    a = overlay(disp, m, contours=None)
    assert np.array_equal(a[3, 2], [120, 120, 120])
    top = np.round(0.1 * 120 + 0.9 * colour_lut()[255].astype(float))
    assert np.array_equal(a[3, 15], top)  # full strength (0.9) where the map is at its maximum
    half = np.round(0.55 * 120 + 0.45 * colour_lut()[round(0.375 * 255)].astype(float))
    assert np.allclose(a[3, 7], half, atol=1)
    fixed = overlay(disp, m, opacity=0.45, ramp=None, contours=None)
    assert not np.array_equal(fixed[3, 2], [120, 120, 120])  # a fixed blend tints even the lowest values
    with pytest.raises(ValueError, match="ramp"):
        overlay(disp, m, ramp=(0.6, 0.2))


def test_the_higher_contour_is_drawn_thicker():
    disp = np.zeros((40, 40), np.uint8)
    yy, xx = np.mgrid[0:40, 0:40]
    m = np.exp(-((yy - 20.0) ** 2 + (xx - 20.0) ** 2) / 120.0).astype(np.float32)
    a = overlay(disp, m, contours=(0.5, 0.8))
    ink = np.all(a == CONTOUR_INK, axis=2)
    row = ink[20]
    runs = np.diff(np.flatnonzero(np.diff(np.r_[0, row.astype(int), 0])))[::2]  # lengths of ink runs
    # left to right on the middle row: the 0.5 line, the 0.8 line, the 0.8 line, the 0.5 line
    assert len(runs) == 4 and runs[1] == runs[2] == 2 and runs[0] == runs[3] == 1


def test_map_picture_is_the_map_alone():
    m = np.zeros((4, 4), np.float32)
    m[1, 1] = 3.0
    pic = map_picture(m, (8, 8))
    assert pic.shape == (8, 8, 3)
    assert np.array_equal(pic[7, 7], colour_lut()[0]) and tuple(pic[2, 2]) != tuple(colour_lut()[0])


@settings(max_examples=15, deadline=None)
@given(arrays(np.float32, st.tuples(st.integers(1, 12), st.integers(1, 12)),
              elements=st.floats(-5, 5, width=32) | st.just(float("nan"))))
def test_overlay_never_fails_on_odd_maps(m):
    out = overlay(np.zeros((16, 20), np.uint8), m)
    assert out.shape == (16, 20, 3)
    colours = {tuple(c) for c in colour_lut()}
    assert all(tuple(c) in colours for c in apply_map(np.clip(m, 0, 1)).reshape(-1, 3))


def _chunks(png: bytes) -> list[bytes]:
    """Chunk types of a PNG stream (PNG specification, W3C/ISO 15948, section 5.3)."""
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    out, i = [], 8
    while i < len(png):
        (n,) = struct.unpack(">I", png[i:i + 4])
        kind = png[i + 4:i + 8]
        assert zlib.crc32(png[i + 4:i + 8 + n]) == struct.unpack(">I", png[i + 8 + n:i + 12 + n])[0]
        out.append(kind)
        i += 12 + n
    return out


def test_png_bytes_round_trip_and_no_time_or_text():
    rgb = np.random.default_rng(0).integers(0, 256, (17, 23, 3), dtype=np.uint8)
    b = png_bytes(rgb)
    assert b == png_bytes(rgb.copy())
    assert np.array_equal(np.asarray(Image.open(io.BytesIO(b))), rgb)
    kinds = _chunks(b)
    assert kinds[0] == b"IHDR" and kinds[-1] == b"IEND"
    assert not {b"tIME", b"tEXt", b"zTXt", b"iTXt"} & set(kinds)


def test_scale_bar_runs_from_least_to_most():
    bar = scale_bar(256, 4)
    assert bar.shape == (4, 256, 3)
    assert np.array_equal(bar[0, 0], colour_lut()[0]) and np.array_equal(bar[0, -1], colour_lut()[255])


def test_labelled_scale_bar_has_strip_and_words():
    from casefile.sheet.colours import labelled_scale_bar

    pic = labelled_scale_bar(200, 10)
    assert pic.dtype == np.uint8 and pic.shape[1] == 212
    assert np.array_equal(pic[8, 6], colour_lut()[0]) and np.array_equal(pic[8, 205], colour_lut()[255])
    words = pic[20:, :, :].min(axis=2)
    assert (words < 80).sum() > 50  # dark text under the strip
