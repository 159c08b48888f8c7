"""Raster loading through Pillow: 16-bit grey, RGBA, palette, EXIF orientation, multi-page TIFF.

Outside sources: the PNG specification (16-bit greyscale, alpha), EXIF 2.3 (Orientation tag) and
Pillow, whose decoding of each file is the reference.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from casefile.errors import InputError
from casefile.imaging import load, pixel_digest


def test_sixteen_bit_png(tmp_path: Path, site_key: Path) -> None:
    values = np.array([[0, 257, 32768], [65535, 1000, 514]], dtype=np.uint16)
    path = tmp_path / "grey16.png"
    Image.fromarray(values).save(path)  # PNG 16-bit greyscale (PNG spec, bit depth 16)
    scan = load(path, key=site_key)
    assert scan.kind == "raster" and scan.modality == "RASTER" and scan.channels == 1
    np.testing.assert_allclose(scan.pixels[0], values / 65535.0, rtol=1e-6)  # full scale 2^16 - 1
    # display: value / 257 rounded (65535 / 257 = 255): 257 -> 1, 32768 -> 127.5 -> 128, 514 -> 2
    assert scan.display.tolist() == [[0, 1, 128], [255, 4, 2]]
    assert scan.pixel_sha256 == pixel_digest(values[np.newaxis].astype(np.float64))
    assert scan.file_sha256 == hashlib.sha256(path.read_bytes()).hexdigest()


def test_rgba_drops_alpha_with_a_note(tmp_path: Path, site_key: Path) -> None:
    rgba = np.zeros((4, 6, 4), dtype=np.uint8)
    rgba[..., 0], rgba[..., 1], rgba[..., 2], rgba[..., 3] = 255, 128, 0, 10
    path = tmp_path / "overlay.png"
    Image.fromarray(rgba, "RGBA").save(path)
    scan = load(path, key=site_key)
    assert scan.channels == 3 and scan.pixels.shape == (3, 4, 6) and scan.display.shape == (4, 6, 3)
    assert scan.display[0, 0].tolist() == [255, 128, 0]  # colour kept, not blended with the alpha
    assert "alpha channel dropped" in scan.notes


def test_palette_becomes_rgb(tmp_path: Path, site_key: Path) -> None:
    img = Image.new("P", (5, 5), 1)
    img.putpalette([0, 0, 0, 12, 34, 56] + [0] * 762)
    path = tmp_path / "pal.bmp"
    img.save(path)
    scan = load(path, key=site_key)
    assert scan.display[2, 2].tolist() == [12, 34, 56]
    assert "palette image converted to RGB" in scan.notes


def test_exif_orientation_6_is_applied(tmp_path: Path, site_key: Path) -> None:
    # EXIF 2.3 Orientation 6: the 0th row is the visual right side -> rotate 90 degrees clockwise to view
    arr = np.zeros((16, 32, 3), dtype=np.uint8)  # stored 32 wide, 16 high
    arr[:, :8] = 255  # white band along the stored left edge
    img = Image.fromarray(arr)
    exif = img.getexif()
    exif[0x0112] = 6
    path = tmp_path / "phone.jpg"
    img.save(path, quality=95, exif=exif.tobytes())
    scan = load(path, key=site_key)
    assert (scan.width, scan.height) == (16, 32)  # rotated: now taller than wide
    # clockwise rotation brings the stored left edge to the top
    assert scan.display[:6].mean() > 200 and scan.display[-6:].mean() < 50
    assert any("EXIF orientation 6" in n for n in scan.notes)


def test_multi_page_tiff_needs_a_frame(tmp_path: Path, site_key: Path) -> None:
    pages = [Image.new("L", (8, 8), v) for v in (10, 90, 200)]
    path = tmp_path / "stack.tif"
    pages[0].save(path, save_all=True, append_images=pages[1:])
    with pytest.raises(InputError, match=r"^stack\.tif: multi-frame file with 3 frames"):
        load(path, key=site_key)
    assert load(path, key=site_key, frame=2).display[0, 0] == 200


def test_eight_bit_grey_png_scale(tmp_path: Path, site_key: Path) -> None:
    path = tmp_path / "flat.png"
    Image.new("L", (4, 4), 51).save(path)
    scan = load(path, key=site_key)
    assert scan.pixels.dtype == np.float32 and scan.pixels[0, 0, 0] == pytest.approx(0.2)  # 51 / 255
    assert scan.to_record()["window"] is None and scan.spacing_mm is None
