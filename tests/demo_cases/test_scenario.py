"""Scenario pictures and writers: determinism, DICOM attributes by the standard, PNG round trip."""

from __future__ import annotations

import numpy as np
import pydicom
import pytest
from PIL import Image
from pydicom.uid import UID

from demo_cases.scenario import BORDER, GLYPHS, LABELS, MARKER_AT, MAX_VALUE, make_case, make_set
from demo_cases.writers import to_8bit, write_dicom, write_png


def test_same_seed_same_pictures():
    a, b = make_set(11, 12), make_set(11, 12)
    assert a.images.tobytes() == b.images.tobytes()
    assert a.labels.tolist() == b.labels.tolist() and a.markers == b.markers
    assert make_set(12, 12).images.tobytes() != a.images.tobytes()


def test_set_is_balanced_and_in_range():
    s = make_set(3, 40)
    assert s.images.dtype == np.uint16 and s.images.shape == (40, 64, 64)
    assert int(s.images.max()) <= MAX_VALUE  # 12 bits stored: 2**12 - 1 = 4095
    assert np.bincount(s.labels, minlength=4).tolist() == [10, 10, 10, 10]


def test_marker_sits_inside_the_excluded_border():
    r0, c0 = MARKER_AT
    for g in GLYPHS.values():
        assert r0 + g.shape[0] <= BORDER and c0 + g.shape[1] <= BORDER
    plain = make_case(np.random.default_rng(5), "crack")
    marked = make_case(np.random.default_rng(5), "crack", marker=True)
    diff = plain != marked
    assert diff.any() and not diff[BORDER:, :].any() and not diff[:, BORDER:].any()
    assert (marked[r0 : r0 + 5, c0 : c0 + 5][GLYPHS["crack"]] == MAX_VALUE).all()


def test_shortcut_set_ties_marker_to_label():
    s = make_set(4, 20, shortcut=True)
    assert all(m == LABELS[lab] for m, lab in zip(s.markers, s.labels, strict=True))
    clean = make_set(4, 20, shortcut=False)
    assert any(m is None for m in clean.markers) and any(m is not None for m in clean.markers)


@pytest.mark.parametrize("label", ["porosity", "shrinkage", "crack"])
def test_defects_remove_metal_inside_the_region_of_interest(label):
    from demo_cases import scenario

    for seed in range(5):
        rng = np.random.default_rng(seed)
        _, metal = scenario._casting(rng)
        dark = scenario._DEFECTS[label](rng, metal) * metal
        assert dark.min() >= 0.0 and dark.max() > 0.1  # a void shows darker: less metal, more exposure
        inner = dark[BORDER:-BORDER, BORDER:-BORDER].sum()
        assert inner >= 0.99 * dark.sum()  # the defect lies inside the cards' ROI (8-px border excluded)


def test_dicom_file_follows_the_dx_attributes(tmp_path):
    img = make_case(np.random.default_rng(1), "porosity", marker=True)
    path = write_dicom(tmp_path / "a.dcm", img, case_no=3, seed=7, burned_in=True)
    ds = pydicom.dcmread(path)
    # DICOM PS3.6 / PS3.4 Annex B: Digital X-Ray Image Storage - For Presentation (UID from memory)
    assert ds.SOPClassUID == "1.2.840.10008.5.1.4.1.1.1.1"
    assert ds.file_meta.MediaStorageSOPClassUID == ds.SOPClassUID
    assert ds.file_meta.MediaStorageSOPInstanceUID == ds.SOPInstanceUID
    # DICOM PS3.3 C.8.11.3 DX Image module: MONOCHROME2, 16 allocated, high bit = stored - 1
    assert ds.Modality == "DX" and ds.PhotometricInterpretation == "MONOCHROME2"
    assert (ds.BitsAllocated, ds.BitsStored, ds.HighBit, ds.PixelRepresentation) == (16, 12, 11, 0)
    assert [float(v) for v in ds.PixelSpacing] == [0.1, 0.1]
    assert [float(v) for v in ds.ImagerPixelSpacing] == [0.1, 0.1]
    assert float(ds.WindowCenter) == 2048 and float(ds.WindowWidth) == 4096
    assert ds.BurnedInAnnotation == "YES"
    assert str(ds.PatientID).startswith("PART-") and str(ds.PatientName) == "Casting^Lot7"
    assert np.array_equal(ds.pixel_array, img)
    for uid in (ds.SOPInstanceUID, ds.StudyInstanceUID, ds.SeriesInstanceUID):
        # DICOM PS3.5 section 9.1: at most 64 characters, digits and dots, no leading zeros
        assert UID(uid).is_valid


def test_dicom_rerun_gives_same_bytes_and_uids(tmp_path):
    img = make_case(np.random.default_rng(2), "sound")
    a = write_dicom(tmp_path / "a.dcm", img, case_no=5)
    b = write_dicom(tmp_path / "b.dcm", img, case_no=5)
    c = write_dicom(tmp_path / "c.dcm", img, case_no=6)
    assert a.read_bytes() == b.read_bytes()
    uids = [pydicom.dcmread(p).SOPInstanceUID for p in (a, b, c)]
    assert uids[0] == uids[1] != uids[2]


def test_dicom_window_maps_the_stored_range_onto_0_1(tmp_path):
    img = np.array([[0, 2048, MAX_VALUE, 1024]], np.uint16).repeat(8, 0).repeat(2, 1)
    ds = pydicom.dcmread(write_dicom(tmp_path / "w.dcm", img, case_no=1))
    # reference: pydicom's VOI LUT (DICOM PS3.3 C.11.2.1.2.1 linear window); output range 0..2**12-1
    out = pydicom.pixels.apply_voi_lut(ds.pixel_array, ds).astype(float) / MAX_VALUE
    assert out[0, 0] == pytest.approx(0.0, abs=1e-3) and out[0, 4] == pytest.approx(1.0, abs=1e-3)
    assert out[0, 2] == pytest.approx(2048 / 4095, abs=2e-3)


def test_png_round_trip(tmp_path):
    img = make_case(np.random.default_rng(3), "crack")
    path = write_png(tmp_path / "a.png", img)
    back = np.asarray(Image.open(path))
    assert back.dtype == np.uint8 and np.array_equal(back, to_8bit(img))
    # 12-bit -> 8-bit by round(v * 255 / 4095): 4095 -> 255, 2048 -> 128, 0 -> 0 (hand computation)
    assert to_8bit(np.array([[0, 2048, 4095]], np.uint16)).tolist() == [[0, 128, 255]]
    assert write_png(tmp_path / "b.png", img).read_bytes() == path.read_bytes()
