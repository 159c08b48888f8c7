"""DICOM loading checked against pydicom's bundled test files and its reference LUT functions."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pydicom
import pytest
from pydicom.dataset import Dataset
from pydicom.pixels import apply_modality_lut, apply_voi_lut

from casefile.imaging import load, pixel_digest

from .synth import bundled, write_dicom


def pydicom_unit(ds: Dataset, out: np.ndarray) -> np.ndarray:
    """Map pydicom's windowed output (kept in the stored/rescaled range) to 0..1 the way it chose it.

    Reference: pydicom.pixels.processing.apply_windowing, which sets y_min/y_max from Bits Stored and
    Pixel Representation, then passes them through Rescale Slope/Intercept.
    """
    if ds.PixelRepresentation == 0:
        y_min, y_max = 0.0, 2.0**ds.BitsStored - 1
    else:
        y_min, y_max = -(2.0 ** (ds.BitsStored - 1)), 2.0 ** (ds.BitsStored - 1) - 1
    if "RescaleSlope" in ds and "RescaleIntercept" in ds:
        y_min = y_min * float(ds.RescaleSlope) + float(ds.RescaleIntercept)
        y_max = y_max * float(ds.RescaleSlope) + float(ds.RescaleIntercept)
    return (out - y_min) / (y_max - y_min)


def test_ct_small_modality_lut_matches_pydicom(site_key: Path) -> None:
    # Reference library: pydicom.pixels.apply_modality_lut (PS3.3 C.11.1.1.2, slope 1, intercept -1024)
    path = bundled("CT_small.dcm")
    ds = pydicom.dcmread(path)
    expected = apply_modality_lut(ds.pixel_array, ds)
    scan = load(path, key=site_key)
    assert scan.pixel_sha256 == pixel_digest(expected[np.newaxis])
    assert scan.modality == "CT"
    assert scan.spacing_mm == pytest.approx((0.661468, 0.661468))  # CT_small Pixel Spacing, read by pydicom
    assert tuple(float(v) for v in ds.PixelSpacing) == scan.spacing_mm
    # CT_small has no window: the data range is used (min -> 0, max -> 1)
    assert scan.window["source"] == "minmax"
    assert scan.pixels.min() == 0.0 and scan.pixels.max() == 1.0
    assert scan.display.dtype == np.uint8 and scan.display.shape == (128, 128)


@pytest.mark.parametrize("function", ["LINEAR", "LINEAR_EXACT", "SIGMOID"])
def test_ct_small_window_matches_pydicom_voi(function: str, site_key: Path) -> None:
    # Reference library: pydicom.pixels.apply_voi_lut with Window Center/Width set on the data set
    path = bundled("CT_small.dcm")
    ds = pydicom.dcmread(path)
    ds.WindowCenter, ds.WindowWidth, ds.VOILUTFunction = 40, 400, function  # soft-tissue window, common practice
    ref = pydicom_unit(ds, apply_voi_lut(apply_modality_lut(ds.pixel_array, ds), ds))
    scan = load(path, key=site_key, window={"center": 40, "width": 400, "function": function})
    np.testing.assert_allclose(scan.pixels[0], ref, atol=1e-6)
    # display is rounded to 0..255; values that sit on .5 may round either way by float noise
    assert np.abs(scan.display.astype(int) - np.rint(ref * 255)).max() <= 1


def test_mr_small_file_window_matches_pydicom(site_key: Path) -> None:
    # MR_small carries Window Center 600 / Width 1600 (LINEAR default); reference pydicom.apply_voi_lut
    path = bundled("MR_small.dcm")
    ds = pydicom.dcmread(path)
    ref = pydicom_unit(ds, apply_voi_lut(ds.pixel_array, ds))
    scan = load(path, key=site_key)
    assert scan.window == {"source": "file", "center": 600.0, "width": 1600.0, "function": "LINEAR"}
    np.testing.assert_allclose(scan.pixels[0], ref, atol=1e-6)


@pytest.mark.parametrize(
    "name", ["MR_small_RLE.dcm", "MR_small_jp2klossless.dcm", "MR_small_jpeg_ls_lossless.dcm",
             "MR_small_bigendian.dcm", "MR_small_implicit.dcm"],
)
def test_lossless_variants_decode_to_the_same_pixels(name: str, site_key: Path) -> None:
    # pydicom's test files README: these are MR_small.dcm re-encoded losslessly (RLE, JPEG 2000, JPEG-LS)
    plain = load(bundled("MR_small.dcm"), key=site_key)
    other = load(bundled(name), key=site_key)
    assert other.pixel_sha256 == plain.pixel_sha256
    np.testing.assert_array_equal(other.pixels, plain.pixels)
    assert other.file_sha256 != plain.file_sha256


def test_modality_lut_sequence_matches_pydicom(tmp_path: Path, site_key: Path) -> None:
    # PS3.3 C.11.1: a Modality LUT Sequence replaces Rescale Slope/Intercept; reference apply_modality_lut
    stored = np.arange(64, dtype=np.uint16).reshape(8, 8) * 4  # 0..252
    item = Dataset()
    item.LUTDescriptor = [128, 16, 16]  # 128 entries, first mapped value 16, 16-bit entries
    item.LUTData = (np.arange(128, dtype="<u2") * 3 + 7).tobytes()  # OW, as most files store it
    item.ModalityLUTType = "HU"
    path = write_dicom(tmp_path / "mlut.dcm", stored, ModalityLUTSequence=[item], BitsStored=16)
    ds = pydicom.dcmread(path)
    expected = apply_modality_lut(ds.pixel_array, ds)
    scan = load(path, key=site_key)
    assert scan.pixel_sha256 == pixel_digest(expected[np.newaxis])
    assert "Modality LUT Sequence applied" in scan.notes


def test_voi_lut_sequence_matches_pydicom(tmp_path: Path, site_key: Path) -> None:
    # PS3.3 C.11.2.1.1 VOI LUT Sequence; reference pydicom.apply_voi_lut (prefers the LUT, as we do)
    stored = np.arange(100, dtype=np.uint16).reshape(10, 10)
    item = Dataset()
    item.LUTDescriptor = [50, 20, 8]  # 50 entries from value 20, 8-bit output
    item.add_new("LUTData", "US", [int(i * 5) for i in range(50)])  # US values 0..245
    path = write_dicom(tmp_path / "vlut.dcm", stored, VOILUTSequence=[item])
    ds = pydicom.dcmread(path)
    ref = apply_voi_lut(ds.pixel_array, ds) / 255.0  # 8-bit LUT output range 0..255 (descriptor bits)
    scan = load(path, key=site_key)
    assert scan.window["source"] == "file-lut"
    np.testing.assert_allclose(scan.pixels[0], ref, atol=1e-6)


@pytest.mark.parametrize("name", ["SC_rgb_jpeg_dcmtk.dcm", "SC_ybr_full_422_uncompressed.dcm", "SC_rgb_rle.dcm"])
def test_colour_files_match_pydicom_rgb(name: str, site_key: Path) -> None:
    # Reference library: pydicom's own decode with YBR -> RGB conversion (Dataset.pixel_array default)
    path = bundled(name)
    ref = pydicom.dcmread(path).pixel_array
    scan = load(path, key=site_key)
    assert scan.channels == 3 and scan.display.shape == ref.shape
    np.testing.assert_array_equal(scan.display, ref)
    np.testing.assert_allclose(np.moveaxis(scan.pixels, 0, -1), ref / 255.0, atol=1e-6)
