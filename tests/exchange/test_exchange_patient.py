"""The exported object's Patient module: empty by default, copied from the case's own source file with
--patient-from, refused for any other file, and never written to the ledger.

Outside sources: DICOM PS3.3 C.7.1.1 (Patient module), C.7.2.2 (Patient Study module), PS3.5 7.4
(Type 2 attributes may be empty); pydicom's bundled test files (CT_small.dcm and the character-set
files) as open data; pydicom's data dictionary as the reference for tags.
"""

from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

import pydicom
import pytest
from pydicom.data import get_charset_files, get_testdata_file
from pydicom.datadict import tag_for_keyword

from casefile.cli import main
from casefile.errors import InputError
from casefile.exchange import EMPTY_PATIENT, PATIENT_MODULE, encapsulated_pdf, patient_from
from casefile.ledger import Ledger

CT_SMALL = get_testdata_file("CT_small.dcm")
CT_NAME, CT_ID = "CompressedSamples^CT1", "1CT1"  # what pydicom's CT_small.dcm holds


def case_for(fx, path: str) -> dict:
    """The sheet fixture case, made to record ``path`` as its input (digest and UIDs)."""
    case, _ = fx.build_case()
    src = pydicom.dcmread(path, stop_before_pixels=True)
    with open(path, "rb") as f:
        case["input"]["file_sha256"] = hashlib.sha256(f.read()).hexdigest()
    case["input"].update(study_uid=str(src.StudyInstanceUID), series_uid=str(src.SeriesInstanceUID),
                         sop_uid=str(src.SOPInstanceUID), file_name=Path(path).name,
                         metadata={"SOPClassUID": str(src.SOPClassUID)})
    return case


def test_patient_module_keywords_are_dictionary_tags_of_the_patient_groups():
    for kw in PATIENT_MODULE:
        tag = tag_for_keyword(kw)
        assert tag is not None, kw  # pydicom's data dictionary knows the keyword
        # PS3.3 C.7.1.1: group 0010, Referenced Patient Sequence (0008,1120), de-identification (0012,00xx)
        assert tag >> 16 == 0x0010 or tag in (0x00081120, 0x00120062, 0x00120063, 0x00120064), kw
    for kw in ("PatientAge", "PatientWeight", "PatientSize", "AdditionalPatientHistory"):
        assert kw not in PATIENT_MODULE  # Patient Study module (C.7.2.2), not Patient


def test_copied_from_the_source_matched_by_digest(fx):
    module = patient_from(CT_SMALL, case_for(fx, CT_SMALL))
    assert module.matched_by == "SHA-256"
    assert str(module.attributes["PatientName"]) == CT_NAME and module.attributes["PatientID"] == CT_ID
    assert set(module.attributes) <= set(PATIENT_MODULE)
    assert "PatientAge" not in module.attributes  # present in CT_small, but of the Patient Study module
    words = module.words()
    assert "PatientName, PatientID" in words and "the ledger holds none of it" in words
    assert CT_NAME not in words and CT_ID not in words  # the message names attributes, never values
    assert "\n" not in words


def test_a_re_encoded_source_is_matched_by_its_uid_with_a_note(fx, tmp_path):
    case = case_for(fx, CT_SMALL)
    copy = tmp_path / "re-encoded.dcm"
    ds = pydicom.dcmread(CT_SMALL)
    ds.ImageComments = "touched by an archive"
    ds.save_as(copy)
    module = patient_from(copy, case)
    assert module.matched_by == "SOP Instance UID"
    assert "SOP Instance UID only" in module.words() and "SHA-256 differs" in module.words()


def test_any_other_file_is_refused(fx, tmp_path):
    case = case_for(fx, CT_SMALL)
    other = get_testdata_file("MR_small.dcm")
    with pytest.raises(InputError, match=r"MR_small.dcm: not the source of case c-000123"):
        patient_from(other, case)
    png = tmp_path / "photo.png"
    png.write_bytes(b"\x89PNG\r\n\x1a\n" + b"\x00" * 64)
    with pytest.raises(InputError, match="photo.png: not a DICOM file"):
        patient_from(png, case)
    with pytest.raises(InputError, match="missing.dcm: cannot read"):
        patient_from(tmp_path / "missing.dcm", case)


@pytest.mark.parametrize("name", ["chrFren.dcm", "chrRuss.dcm", "chrJapMulti.dcm"])
def test_names_in_other_character_sets_arrive_as_utf8(fx, tmp_path, name):
    src_path = get_charset_files(name)[0]
    src = pydicom.dcmread(src_path)
    module = patient_from(src_path, case_for(fx, src_path))
    ds = encapsulated_pdf(b"%PDF-1.4\n", study_uid=str(src.StudyInstanceUID), patient_module=module.attributes,
                          title="sheet", case_id="c-1")
    ds.save_as(tmp_path / "out.dcm", enforce_file_format=True)
    back = pydicom.dcmread(tmp_path / "out.dcm")
    assert back.SpecificCharacterSet == "ISO_IR 192"  # PS3.3 C.12.1.1.2: ISO_IR 192 is UTF-8
    assert str(back.PatientName) == str(src.PatientName)
    assert str(src.PatientName).encode("utf-8") in (tmp_path / "out.dcm").read_bytes()


def test_only_patient_module_attributes_are_accepted():
    with pytest.raises(InputError, match="PatientAge is not an attribute of the Patient module"):
        encapsulated_pdf(b"%PDF-1.4\n", study_uid="2.25.1", patient_module={"PatientAge": "040Y"}, title="t",
                         case_id="c-1")


@pytest.fixture()
def ledger_with_ct_case(fx, tmp_path):
    """A ledger whose one case records pydicom's CT_small.dcm (copied to tmp_path) as its input."""
    src = tmp_path / "CT_small.dcm"
    shutil.copy(CT_SMALL, src)
    case = case_for(fx, str(src))
    _, blobs = fx.build_case()
    store = tmp_path / "l.db"
    led = Ledger(str(store))
    led.append("case", case, blobs=list(blobs.values()))
    led.close()
    return store, case["case_id"], src


def _ledger_bytes(store: Path) -> bytes:
    return b"".join(p.read_bytes() for p in store.parent.glob(store.name + "*"))  # with -wal and -shm


def test_cli_export_with_patient_from_writes_the_source_patient_and_not_the_ledger(ledger_with_ct_case, tmp_path,
                                                                                   capsys):
    store, cid, src = ledger_with_ct_case
    out = tmp_path / "sheet.dcm"
    assert main(["--store", str(store), "export", cid, "--dicom", str(out), "--patient-from", str(src)]) == 0
    ds = pydicom.dcmread(out)
    assert str(ds.PatientName) == CT_NAME and ds.PatientID == CT_ID
    assert ds.StudyInstanceUID == pydicom.dcmread(src).StudyInstanceUID
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Patient module copied from CT_small.dcm" in err
    after = _ledger_bytes(store)
    assert CT_NAME.encode() not in after and b"CompressedSamples" not in after
    led = Ledger(str(store), create=False)
    assert led.head()[0] == 1  # the export appended nothing
    led.close()


def test_cli_export_says_what_the_patient_fields_hold_by_default(ledger_with_ct_case, tmp_path, capsys):
    store, cid, _ = ledger_with_ct_case
    out = tmp_path / "sheet.dcm"
    assert main(["--store", str(store), "export", cid, "--dicom", str(out)]) == 0
    ds = pydicom.dcmread(out)
    assert ds.PatientName == "" and ds.PatientID == ""  # Type 2, empty: value unknown (PS3.5 7.4)
    assert capsys.readouterr().err.strip() == f"casefile export: {EMPTY_PATIENT}"


def test_cli_export_refuses_a_wrong_source_and_writes_nothing(ledger_with_ct_case, tmp_path, capsys):
    store, cid, _ = ledger_with_ct_case
    out = tmp_path / "sheet.dcm"
    code = main(["--store", str(store), "export", cid, "--dicom", str(out), "--patient-from",
                 get_testdata_file("MR_small.dcm")])
    assert code == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "not the source of case" in err
    assert not out.exists() and not out.with_suffix(".pdf").exists()


def test_archive_files_the_sheet_under_the_source_patient_and_study(ledger_with_ct_case, orthanc, capsys):
    """Orthanc (the archive CI runs) files an object by Patient ID and Study Instance UID; with
    --patient-from the sheet lands beside the source image, under the same patient and study."""
    from casefile.exchange import push

    store, cid, src = ledger_with_ct_case
    source = pydicom.dcmread(src)
    (status,) = push([source], "127.0.0.1", orthanc.port, "ORTHANC")  # the study as the archive holds it
    assert status.ok
    code = main(["--store", str(store), "export", cid, "--pacs", f"127.0.0.1:{orthanc.port}",
                 "--called-aet", "ORTHANC", "--patient-from", str(src)])
    out = capsys.readouterr()
    assert code == 0, out.err
    assert out.out.startswith("stored: SOP Instance 2.25.")  # C-STORE status 0000 (PS3.4 B.2.3) in words
    patients = orthanc.json("/patients?expand")
    assert len(patients) == 1  # no second, empty "patient" for the sheet
    (patient,) = patients
    assert patient["MainDicomTags"]["PatientID"] == CT_ID
    assert patient["MainDicomTags"]["PatientName"] == CT_NAME
    (study_id,) = patient["Studies"]
    study = orthanc.json(f"/studies/{study_id}")
    assert study["MainDicomTags"]["StudyInstanceUID"] == source.StudyInstanceUID
    assert study["PatientMainDicomTags"]["PatientID"] == CT_ID
    modalities = sorted(s["MainDicomTags"]["Modality"] for s in orthanc.json(f"/studies/{study_id}/series?expand"))
    assert modalities == ["CT", "DOC"]  # the source image and the sheet (Modality DOC, PS3.3 C.24.1)
    assert CT_NAME.encode() not in _ledger_bytes(store)


def test_without_patient_from_the_archive_files_the_sheet_apart(ledger_with_ct_case, orthanc, capsys):
    """Why the option exists: with empty Patient ID, Orthanc keeps the sheet under a patient of its own."""
    from casefile.exchange import push

    store, cid, src = ledger_with_ct_case
    assert push([pydicom.dcmread(src)], "127.0.0.1", orthanc.port, "ORTHANC")[0].ok
    assert main(["--store", str(store), "export", cid, "--pacs", f"127.0.0.1:{orthanc.port}",
                 "--called-aet", "ORTHANC"]) == 0
    assert EMPTY_PATIENT in capsys.readouterr().err
    ids = sorted(p["MainDicomTags"].get("PatientID", "") for p in orthanc.json("/patients?expand"))
    assert ids == ["", CT_ID]
