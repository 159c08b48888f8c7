"""Encapsulated PDF and Secondary Capture objects checked against DICOM PS3.3 / PS3.10 module tables."""

from __future__ import annotations

import numpy as np
import pydicom
import pytest
from pydicom.data import get_testdata_file

from casefile.errors import CasefileError, InputError
from casefile.exchange import (
    NO_DICOM_SOURCE,
    ExchangeError,
    encapsulated_pdf,
    encapsulated_pdf_for_case,
    export_case,
    save,
    secondary_capture,
)

# Required attributes of the Encapsulated PDF IOD (PS3.3 A.45.1, table A.45.1-1), by module and Type,
# from memory of the module tables: Type 1 must hold a value, Type 2 must be present (may be empty).
REQUIRED = {
    "C.7.1.1 Patient": {2: ["PatientName", "PatientID", "PatientBirthDate", "PatientSex"]},
    "C.7.2.1 General Study": {1: ["StudyInstanceUID"],
                              2: ["StudyDate", "StudyTime", "ReferringPhysicianName", "StudyID", "AccessionNumber"]},
    "C.24.1 Encapsulated Document Series": {1: ["Modality", "SeriesInstanceUID", "SeriesNumber"]},
    "C.7.5.1 General Equipment": {2: ["Manufacturer"]},
    "C.8.6.1 SC Equipment": {1: ["ConversionType"]},
    "C.24.2 Encapsulated Document": {
        1: ["InstanceNumber", "BurnedInAnnotation", "MIMETypeOfEncapsulatedDocument", "EncapsulatedDocument"],
        2: ["ContentDate", "ContentTime", "AcquisitionDateTime", "DocumentTitle", "ConceptNameCodeSequence"],
    },
    "C.12.1 SOP Common": {1: ["SOPClassUID", "SOPInstanceUID"]},
}
ENCAPSULATED_PDF_STORAGE = "1.2.840.10008.5.1.4.1.1.104.1"  # PS3.4 B.5 table of Storage SOP Classes
SECONDARY_CAPTURE_STORAGE = "1.2.840.10008.5.1.4.1.1.7"  # PS3.4 B.5
EXPLICIT_VR_LE = "1.2.840.10008.1.2.1"  # PS3.5 A.2


def _exported(fx, sheet_pdf, tmp_path):
    case, _ = fx.build_case()
    out = export_case(case, sheet_pdf, dicom_path=tmp_path / "sheet.dcm", entry_hash=fx.ENTRY_HASH)
    return case, out, pydicom.dcmread(tmp_path / "sheet.dcm")


def test_encapsulated_pdf_has_every_required_attribute(fx, sheet_pdf, tmp_path):
    _, _, ds = _exported(fx, sheet_pdf, tmp_path)
    for module, by_type in REQUIRED.items():
        for kw in by_type.get(1, []):
            assert kw in ds and ds[kw].value not in (None, "", b""), f"{module}: {kw} (Type 1)"
        for kw in by_type.get(2, []):
            assert kw in ds, f"{module}: {kw} (Type 2)"


def test_encapsulated_pdf_values_and_document_bytes(fx, sheet_pdf, tmp_path):
    case, out, ds = _exported(fx, sheet_pdf, tmp_path)
    assert ds.SOPClassUID == ENCAPSULATED_PDF_STORAGE
    assert ds.Modality == "DOC"  # PS3.3 C.24.1: Modality DOC for encapsulated documents
    assert ds.ConversionType == "WSD"  # PS3.3 C.8.6.1 defined term: workstation
    assert ds.BurnedInAnnotation == "YES"
    assert ds.MIMETypeOfEncapsulatedDocument == "application/pdf"  # RFC 3778 media type
    assert ds.StudyInstanceUID == case["input"]["study_uid"]
    assert ds.SeriesInstanceUID != case["input"]["series_uid"] and ds.SOPInstanceUID != case["input"]["sop_uid"]
    assert ds.EncapsulatedDocumentLength == len(sheet_pdf)
    assert len(ds.EncapsulatedDocument) % 2 == 0  # PS3.5 7.1: values have even length
    assert ds.EncapsulatedDocument[: len(sheet_pdf)] == sheet_pdf
    assert ds.PatientName == "" and ds.PatientID == ""  # identifiers never reach casefile
    assert ds.file_meta.TransferSyntaxUID == EXPLICIT_VR_LE
    assert ds.file_meta.MediaStorageSOPInstanceUID == ds.SOPInstanceUID
    raw = (tmp_path / "sheet.dcm").read_bytes()
    assert raw[128:132] == b"DICM"  # PS3.10 7.1: 128-byte preamble then the DICM prefix
    assert out.dataset is not None and out.reason == ""


def test_uids_are_stable_for_the_same_entry(fx, sheet_pdf):
    case, _ = fx.build_case()
    a = encapsulated_pdf_for_case(case, sheet_pdf, entry_hash=fx.ENTRY_HASH)
    b = encapsulated_pdf_for_case(case, sheet_pdf, entry_hash=fx.ENTRY_HASH)
    assert a.SOPInstanceUID == b.SOPInstanceUID and a.SeriesInstanceUID == b.SeriesInstanceUID
    assert a.SOPInstanceUID.startswith("2.25.")  # PS3.5 B.2: UUID-derived UIDs
    assert len(a.SOPInstanceUID) <= 64  # PS3.5 9.1


def test_source_instance_from_a_pydicom_test_file(sheet_pdf):
    src = pydicom.dcmread(get_testdata_file("CT_small.dcm"))  # open data bundled with pydicom
    ds = encapsulated_pdf(sheet_pdf, study_uid=src.StudyInstanceUID, title="sheet", case_id="c-1",
                          source=(src.SOPClassUID, src.SOPInstanceUID), when="2026-01-02T03:04:05Z")
    assert ds.StudyInstanceUID == src.StudyInstanceUID
    item = ds.SourceInstanceSequence[0]
    assert item.ReferencedSOPInstanceUID == src.SOPInstanceUID
    assert (ds.ContentDate, ds.ContentTime, ds.AcquisitionDateTime) == ("20260102", "030405", "20260102030405")


def test_png_source_writes_the_pdf_and_explains(fx, sheet_pdf, tmp_path):
    case, _ = fx.build_case(dicom=False)
    out = export_case(case, sheet_pdf, dicom_path=tmp_path / "x.dcm")
    assert out.dataset is None and out.dicom_path is None
    assert NO_DICOM_SOURCE in out.reason and "bench-photo-0007.png" in out.reason
    assert out.pdf_path == tmp_path / "x.pdf" and out.pdf_path.read_bytes() == sheet_pdf
    assert not (tmp_path / "x.dcm").exists()
    with pytest.raises(ExchangeError, match="no DICOM object made: the source was not a DICOM study"):
        encapsulated_pdf_for_case(case, sheet_pdf)
    assert issubclass(ExchangeError, CasefileError)


def test_not_a_pdf_is_refused(fx):
    case, _ = fx.build_case()
    with pytest.raises(InputError, match="not a PDF"):
        encapsulated_pdf_for_case(case, b"hello")


def test_secondary_capture_reads_back_pixels(tmp_path):
    rgb = np.random.default_rng(1).integers(0, 256, (9, 7, 3), dtype=np.uint8)  # odd sizes: padding
    ds = secondary_capture(rgb, study_uid="2.25.1", case_id="c-1", description="Grad-CAM overlay")
    save(ds, tmp_path / "sc.dcm")
    back = pydicom.dcmread(tmp_path / "sc.dcm")
    assert back.SOPClassUID == SECONDARY_CAPTURE_STORAGE
    assert back.PhotometricInterpretation == "RGB" and back.SamplesPerPixel == 3  # PS3.3 C.7.6.3
    assert back.ConversionType == "WSD"
    assert np.array_equal(back.pixel_array, rgb)  # pydicom's own decoder, reference library
