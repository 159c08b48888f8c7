"""DICOM loading on synthetic files: Hounsfield phantom, MONOCHROME1, multi-frame, no file meta.

Outside sources: DICOM PS3.3 C.11.1.1.2 (Rescale Slope/Intercept), C.7.6.3.1.2 (MONOCHROME1), PS3.5
(implicit VR little endian default), the Hounsfield scale's definition (air -1000 HU, water 0 HU), and
pydicom's bundled SC_rgb_rle_2frame.dcm decoded by pydicom as the reference frames.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pydicom
import pytest

from casefile.errors import InputError
from casefile.imaging import load, pixel_digest

from .synth import bundled, write_dicom


def test_hounsfield_phantom_air_and_water(tmp_path: Path, site_key: Path) -> None:
    # Common practice for CT: stored = HU + 1024 with Rescale Slope 1, Intercept -1024 (PS3.3 C.11.1.1.2)
    # Air is about -1000 HU, water 0 HU (definition of the Hounsfield scale; common practice).
    stored = np.full((32, 32), 24, dtype=np.uint16)  # air: 24 - 1024 = -1000 HU
    stored[8:24, 8:24] = 1024  # water insert: 1024 - 1024 = 0 HU
    path = write_dicom(tmp_path / "phantom.dcm", stored, Modality="CT", RescaleSlope=1,
                       RescaleIntercept=-1024, RescaleType="HU", BitsStored=12, HighBit=11)
    # brain window (common practice): centre 40, width 80 -> air black, water just under mid-grey
    scan = load(path, key=site_key, window={"center": 40, "width": 80, "function": "LINEAR_EXACT"})
    hu = np.where(stored == 24, -1000.0, 0.0)
    assert scan.pixel_sha256 == pixel_digest(hu[np.newaxis])  # the digest is over HU values
    assert scan.pixels[0, 0, 0] == 0.0  # -1000 HU below c - w/2 = 0
    assert scan.pixels[0, 16, 16] == pytest.approx(0.0)  # 0 HU sits exactly at c - w/2 = 0 -> ymin
    wide = load(path, key=site_key, window={"center": 0, "width": 2000, "function": "LINEAR_EXACT"})
    assert wide.pixels[0, 0, 0] == pytest.approx(0.0)  # (-1000 - 0) / 2000 + 0.5 = 0
    assert wide.pixels[0, 16, 16] == pytest.approx(0.5)  # (0 - 0) / 2000 + 0.5
    assert wide.metadata["RescaleIntercept"] == -1024.0


def test_monochrome1_is_inverted_after_the_window(tmp_path: Path, site_key: Path) -> None:
    # PS3.3 C.7.6.3.1.2: MONOCHROME1 shows the minimum value as white; inversion follows the VOI
    stored = np.tile(np.arange(0, 64, dtype=np.uint16) * 64, (32, 1))
    win = {"center": 2000, "width": 2000, "function": "LINEAR"}
    m2 = load(write_dicom(tmp_path / "m2.dcm", stored), key=site_key, window=win)
    m1 = load(write_dicom(tmp_path / "m1.dcm", stored, PhotometricInterpretation="MONOCHROME1"),
              key=site_key, window=win)
    np.testing.assert_allclose(m1.pixels, 1.0 - m2.pixels, atol=1e-7)
    assert m1.display[0, 0] == 255 and m2.display[0, 0] == 0
    assert m1.pixel_sha256 == m2.pixel_sha256  # the values are the same; only the display differs
    assert any("MONOCHROME1" in n for n in m1.notes)


def test_multi_frame_refused_without_frame(tmp_path: Path, site_key: Path) -> None:
    frames = np.stack([np.full((16, 16), v, dtype=np.uint16) for v in (10, 20, 30)])
    path = write_dicom(tmp_path / "cine.dcm", frames)
    with pytest.raises(InputError, match=r"^cine\.dcm: multi-frame file with 3 frames; choose one") as info:
        load(path, key=site_key)
    assert "\n" not in str(info.value)
    with pytest.raises(InputError, match="frame 3 out of range"):
        load(path, key=site_key, frame=3)
    scan = load(path, key=site_key, frame=1, window="minmax")
    assert scan.frame == 1
    assert scan.pixel_sha256 == pixel_digest(np.full((1, 16, 16), 20.0))


def test_bundled_multi_frame_selects_the_frame(site_key: Path) -> None:
    # pydicom's SC_rgb_rle_2frame.dcm: reference frames from pydicom's own decode
    path = bundled("SC_rgb_rle_2frame.dcm")
    with pytest.raises(InputError, match="2 frames"):
        load(path, key=site_key)
    ref = pydicom.dcmread(path).pixel_array
    scan = load(path, key=site_key, frame=1)
    np.testing.assert_array_equal(scan.display, ref[1])
    assert not np.array_equal(ref[0], ref[1])


def test_file_without_meta_loads_like_the_original(tmp_path: Path, site_key: Path) -> None:
    # A bare data set (no preamble, no File Meta, implicit VR little endian: PS3.5 default) is accepted
    ds = pydicom.dcmread(bundled("CT_small.dcm"))
    bare = tmp_path / "bare.dcm"
    del ds.file_meta
    ds.preamble = None
    ds.save_as(bare, implicit_vr=True, little_endian=True, enforce_file_format=False)
    assert bare.read_bytes()[128:132] != b"DICM"
    scan = load(bare, key=site_key)
    assert scan.pixel_sha256 == load(bundled("CT_small.dcm"), key=site_key).pixel_sha256
    assert any("File Meta" in n for n in scan.notes)


def test_missing_modality_is_tolerated(tmp_path: Path, site_key: Path) -> None:
    # industrial radiographs in DICOM form sometimes omit Modality; Type 1 in PS3.3 C.7.3.1, so we note it
    path = write_dicom(tmp_path / "weld.dcm", np.zeros((8, 8), dtype=np.uint16) + 5, Modality=None,
                       ImagerPixelSpacing=[0.1, 0.1])
    scan = load(path, key=site_key)
    assert scan.modality == "OT" and any("Modality missing" in n for n in scan.notes)
    assert scan.spacing_mm == (0.1, 0.1)
    assert any("Imager Pixel Spacing" in n for n in scan.notes)
    assert scan.pixels.max() == 0.0  # constant image shown black, noted
