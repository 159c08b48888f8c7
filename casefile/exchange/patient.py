"""The Patient module (DICOM PS3.3 C.7.1.1) of an exported sheet: empty by default, or copied at export
time from the case's own source file, so an archive files the sheet with its study.

casefile records never hold patient identifiers. By default the exported object's Patient Name and
Patient ID are therefore present but empty: Type 2 attributes with no value mean "unknown" (PS3.5
7.4). An explicit marker such as "ANONYMOUS" was considered and left out: an archive would file every
exported sheet under that one made-up patient. With ``patient_from(path, case)`` the attributes come
from the source file itself, read when the export runs and passed on to the DICOM object only; the
ledger never sees them.
"""

from __future__ import annotations

import copy
import os
from dataclasses import dataclass
from typing import Any

import pydicom
from pydicom.errors import InvalidDicomError

from ..errors import InputError
from ..files import sha256_file

# Attributes of the Patient module, PS3.3 C.7.1.1 (Table C.7-1, including the Issuer of Patient ID
# macro), by pydicom keyword; from memory of the 2024 edition of the table.
PATIENT_MODULE = (
    "PatientName", "PatientID", "IssuerOfPatientID", "IssuerOfPatientIDQualifiersSequence", "TypeOfPatientID",
    "PatientBirthDate", "PatientBirthTime", "PatientBirthDateInAlternativeCalendar",
    "PatientDeathDateInAlternativeCalendar", "PatientAlternativeCalendar", "PatientSex",
    "ReferencedPatientPhotoSequence", "QualityControlSubject", "ReferencedPatientSequence",
    "OtherPatientIDsSequence", "OtherPatientNames", "EthnicGroup", "EthnicGroupCodeSequence", "PatientComments",
    "PatientSpeciesDescription", "PatientSpeciesCodeSequence", "PatientBreedDescription",
    "PatientBreedCodeSequence", "BreedRegistrationSequence", "StrainDescription", "StrainNomenclature",
    "StrainCodeSequence", "StrainAdditionalInformation", "StrainStockSequence", "GeneticModificationsSequence",
    "ResponsiblePerson", "ResponsiblePersonRole", "ResponsibleOrganization", "PatientIdentityRemoved",
    "DeidentificationMethod", "DeidentificationMethodCodeSequence", "SourcePatientGroupIdentificationSequence",
    "GroupOfPatientsIdentificationSequence",
)
# The module's Type 2 attributes: always present, empty when unknown (PS3.3 C.7.1.1).
PATIENT_TYPE2 = ("PatientName", "PatientID", "PatientBirthDate", "PatientSex")

EMPTY_PATIENT = ("Patient Name and Patient ID are empty in the DICOM object (DICOM Type 2: value unknown), "
                 "because casefile keeps patient identifiers out of the ledger; --patient-from SOURCE.dcm "
                 "copies them from the case's source file at export time")


@dataclass(frozen=True)
class PatientModule:
    """Patient module attributes read from a source file, and how that file was matched to the case."""

    attributes: dict[str, Any]
    source: str
    matched_by: str  # "SHA-256" or "SOP Instance UID"

    def words(self) -> str:
        """One line for the export's message (names the attributes, never their values)."""
        names = ", ".join(self.attributes) or "none present"
        line = (f"Patient module copied from {self.source} into the DICOM object only ({names}); "
                "the ledger holds none of it")
        if self.matched_by != "SHA-256":
            line += (f"; note: {self.source} was matched to the case by its SOP Instance UID only, its "
                     "SHA-256 differs from the recorded input (re-encoded or changed since it was recorded)")
        return line


def _digest(path: str | os.PathLike[str]) -> str:
    try:
        return sha256_file(path)
    except OSError as e:
        raise InputError(f"{path}: cannot read the patient source ({e.strerror})") from e


def patient_from(path: str | os.PathLike[str], case: dict[str, Any]) -> PatientModule:
    """The Patient module of ``path``, which must be the case's own source file.

    It is refused (InputError, one line) unless its SHA-256 equals the case's ``input.file_sha256``
    or, failing that, its SOP Instance UID and Study Instance UID equal the case's ``sop_uid`` and
    ``study_uid``. Nothing is written anywhere.
    """
    inp = case.get("input") or {}
    cid = case.get("case_id", "?")
    digest = _digest(path)
    try:
        ds = pydicom.dcmread(path, stop_before_pixels=True)  # the header only; the pixels are never read
    except (InvalidDicomError, Exception) as e:  # any parse failure is one line about this file
        raise InputError(f"{path}: not a DICOM file ({type(e).__name__}); --patient-from needs the case's DICOM "
                         "source") from None
    if digest == inp.get("file_sha256"):
        matched = "SHA-256"
    elif inp.get("sop_uid") and str(ds.get("SOPInstanceUID", "")) == str(inp["sop_uid"]) and \
            str(ds.get("StudyInstanceUID", "")) == str(inp.get("study_uid") or ""):
        matched = "SOP Instance UID"
    else:
        raise InputError(f"{path}: not the source of case {cid}: its SHA-256 {digest[:12]} differs from the "
                         f"recorded input {str(inp.get('file_sha256'))[:12]} and its SOP Instance UID does not "
                         "match the case's either; nothing was exported")
    ds.decode()  # text values to Unicode with the file's own character set; the export writes UTF-8
    attributes = {kw: copy.deepcopy(ds[kw].value) for kw in PATIENT_MODULE if kw in ds}
    return PatientModule(attributes, os.path.basename(os.fspath(path)), matched)
