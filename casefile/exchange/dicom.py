"""DICOM objects made from a case sheet: Encapsulated PDF (PS3.3 A.45) and Secondary Capture (A.8).

Identifiers: casefile records never hold the patient's name, ID or birth date, so the Patient module's
Type 2 attributes are written empty unless the caller passes ``patient_module`` (keyword -> value, only
attributes of the Patient module, PS3.3 C.7.1.1): ``exchange.patient.patient_from`` reads them from the
case's source file at export time, or a site re-attaches them from its own system. The keyed pseudonym
is *not* put in PatientID: an archive would file the sheet under a different "patient" than the
source study, and the pseudonym is already printed on the sheet itself.
"""

from __future__ import annotations

import os
import uuid
from datetime import UTC, datetime
from typing import Any

import numpy as np
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.uid import (
    PYDICOM_IMPLEMENTATION_UID,
    EncapsulatedPDFStorage,
    ExplicitVRLittleEndian,
    SecondaryCaptureImageStorage,
    generate_uid,
)

from .. import __version__
from ..errors import InputError
from .errors import ExchangeError
from .patient import PATIENT_MODULE, PATIENT_TYPE2

NO_DICOM_SOURCE = "no DICOM object made: the source was not a DICOM study"
# General Study (PS3.3 C.7.2.1) Type 2 attributes.
STUDY_TYPE2 = ("StudyDate", "StudyTime", "ReferringPhysicianName", "StudyID", "AccessionNumber")
_UID_NAMESPACE = uuid.uuid5(uuid.NAMESPACE_URL, "casefile:dicom-export")
SERIES_NUMBER = 9701  # a high number keeps the sheets apart from the acquisition series (common practice)


def _stamp(when: datetime | str | None) -> datetime:
    if when is None:
        return datetime.now(UTC)
    if isinstance(when, str):
        try:
            when = datetime.fromisoformat(when.replace("Z", "+00:00"))
        except ValueError as e:
            raise InputError(f"exchange: time {when!r} is not an ISO 8601 time") from e
    return (when if when.tzinfo else when.replace(tzinfo=UTC)).astimezone(UTC)


def _uid(seed: list[str] | None) -> str:
    """A 2.25 UID (PS3.5 B.2): a name-based UUID (RFC 4122 version 5) of ``seed`` when given, so
    re-exports get the same UID; a random one otherwise."""
    if not seed:
        return generate_uid(prefix=None)
    return f"2.25.{uuid.uuid5(_UID_NAMESPACE, '|'.join(seed)).int}"


def _base(sop_class: str, *, study_uid: str, patient_module: dict[str, Any] | None, when: datetime,
          instance_number: int, seed: list[str] | None, series_description: str) -> Dataset:
    if not study_uid:
        raise ExchangeError(f"{NO_DICOM_SOURCE} (no Study Instance UID)")
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = sop_class
    meta.MediaStorageSOPInstanceUID = _uid(seed and [*seed, "instance"])
    meta.TransferSyntaxUID = ExplicitVRLittleEndian
    meta.ImplementationClassUID = PYDICOM_IMPLEMENTATION_UID
    meta.ImplementationVersionName = f"CASEFILE_{__version__}"[:16]
    ds = Dataset()
    ds.file_meta = meta
    ds.SpecificCharacterSet = "ISO_IR 192"  # UTF-8: titles and notes may hold any script
    ds.SOPClassUID = sop_class
    ds.SOPInstanceUID = meta.MediaStorageSOPInstanceUID
    for kw in PATIENT_TYPE2:
        setattr(ds, kw, "")
    for kw, value in (patient_module or {}).items():
        if kw not in PATIENT_MODULE:
            raise InputError(f"exchange: {kw} is not an attribute of the Patient module (PS3.3 C.7.1.1)")
        setattr(ds, kw, value)
    ds.StudyInstanceUID = study_uid
    for kw in STUDY_TYPE2:
        setattr(ds, kw, "")
    ds.SeriesInstanceUID = _uid(seed and [*seed, "series"])
    ds.SeriesNumber = SERIES_NUMBER
    ds.SeriesDescription = series_description
    ds.InstanceNumber = instance_number
    ds.Manufacturer = "casefile"  # General Equipment C.7.5.1 (Type 2)
    ds.SoftwareVersions = __version__
    ds.ConversionType = "WSD"  # SC Equipment C.8.6.1: workstation
    ds.ContentDate = when.strftime("%Y%m%d")
    ds.ContentTime = when.strftime("%H%M%S")
    ds.InstanceCreationDate = ds.ContentDate
    ds.InstanceCreationTime = ds.ContentTime
    ds.TimezoneOffsetFromUTC = "+0000"
    return ds


def encapsulated_pdf(
    pdf_bytes: bytes,
    *,
    study_uid: str,
    patient_module: dict[str, Any] | None = None,
    title: str,
    case_id: str,
    when: datetime | str | None = None,
    instance_number: int = 1,
    source: tuple[str, str] | None = None,
    stable_uids: str | None = None,
) -> Dataset:
    """An Encapsulated PDF object (SOP Class 1.2.840.10008.5.1.4.1.1.104.1) in the source study.

    ``source`` = (SOP Class UID, SOP Instance UID) of the source image fills the Source Instance
    Sequence. ``stable_uids`` (e.g. the ledger entry hash) makes the new Series and SOP Instance
    UIDs derive from it, so exporting the same entry twice gives the same object.
    """
    if not isinstance(pdf_bytes, bytes | bytearray) or not bytes(pdf_bytes[:5]) == b"%PDF-":
        raise InputError(f"case {case_id}: the document to wrap is not a PDF")
    seed = [stable_uids, case_id, "pdf"] if stable_uids else None
    t = _stamp(when)
    ds = _base(EncapsulatedPDFStorage, study_uid=study_uid, patient_module=patient_module, when=t,
               instance_number=instance_number, seed=seed, series_description="casefile case sheets")
    ds.Modality = "DOC"
    ds.AcquisitionDateTime = t.strftime("%Y%m%d%H%M%S")
    ds.BurnedInAnnotation = "YES"  # the sheet prints the pseudonym and case identifiers
    ds.DocumentTitle = title[:1024]
    ds.ConceptNameCodeSequence = []  # Type 2: may be empty (PS3.3 C.24.2)
    ds.MIMETypeOfEncapsulatedDocument = "application/pdf"
    if source is not None:
        item = Dataset()
        item.ReferencedSOPClassUID, item.ReferencedSOPInstanceUID = source
        ds.SourceInstanceSequence = [item]
    data = bytes(pdf_bytes)
    ds.EncapsulatedDocumentLength = len(data)
    ds.EncapsulatedDocument = data + (b"\x00" if len(data) % 2 else b"")  # OB values have even length
    return ds


def secondary_capture(
    rgb: np.ndarray,
    *,
    study_uid: str,
    case_id: str,
    description: str,
    patient_module: dict[str, Any] | None = None,
    when: datetime | str | None = None,
    instance_number: int = 1,
    stable_uids: str | None = None,
) -> Dataset:
    """An overlay picture as Secondary Capture Image Storage (1.2.840.10008.5.1.4.1.1.7), RGB 8-bit."""
    a = np.ascontiguousarray(rgb)
    if a.dtype != np.uint8 or a.ndim != 3 or a.shape[2] != 3:
        raise InputError(f"case {case_id}: secondary capture needs an uint8 [H, W, 3] picture, got {a.shape}")
    seed = [stable_uids, case_id, "sc", description, str(instance_number)] if stable_uids else None
    t = _stamp(when)
    ds = _base(SecondaryCaptureImageStorage, study_uid=study_uid, patient_module=patient_module, when=t,
               instance_number=instance_number, seed=seed, series_description="casefile explanation pictures")
    ds.Modality = "OT"
    ds.PatientOrientation = ""
    ds.BurnedInAnnotation = "NO"
    ds.ImageComments = description[:10240]
    ds.SamplesPerPixel = 3
    ds.PhotometricInterpretation = "RGB"
    ds.PlanarConfiguration = 0
    ds.Rows, ds.Columns = int(a.shape[0]), int(a.shape[1])
    ds.BitsAllocated = 8
    ds.BitsStored = 8
    ds.HighBit = 7
    ds.PixelRepresentation = 0
    ds.LossyImageCompression = "00"
    raw = a.tobytes()
    ds.PixelData = raw + (b"\x00" if len(raw) % 2 else b"")
    return ds


def encapsulated_pdf_for_case(case: dict, pdf_bytes: bytes, *, entry_hash: str | None = None,
                              patient_module: dict[str, Any] | None = None) -> Dataset:
    """The Encapsulated PDF of a recorded case, in the case's source study; a clear error otherwise."""
    inp = case.get("input") or {}
    cid = str(case.get("case_id", "?"))
    if inp.get("kind") != "dicom" or not inp.get("study_uid"):
        raise ExchangeError(f"case {cid}: {NO_DICOM_SOURCE} (input {inp.get('file_name', '?')} is "
                            f"{inp.get('kind', 'unknown')}, without a Study Instance UID); the PDF sheet can "
                            "still be written")
    model = case.get("model") or {}
    title = f"casefile case sheet {cid}: {model.get('name', 'model')} {model.get('version', '')}".strip()
    source = None
    sop_class = (inp.get("metadata") or {}).get("SOPClassUID") if isinstance(inp.get("metadata"), dict) else None
    if inp.get("sop_uid") and sop_class:
        source = (str(sop_class), str(inp["sop_uid"]))
    return encapsulated_pdf(pdf_bytes, study_uid=str(inp["study_uid"]), patient_module=patient_module,
                            title=title, case_id=cid, when=case.get("recorded_at"), source=source,
                            stable_uids=entry_hash)


def save(ds: Dataset, path: str | os.PathLike[str]) -> None:
    """Write ``ds`` as a DICOM Part 10 file (preamble, explicit VR little endian file meta)."""
    try:
        ds.save_as(path, enforce_file_format=True)
    except OSError as e:
        raise InputError(f"{path}: cannot write the DICOM file ({e.strerror})") from e
