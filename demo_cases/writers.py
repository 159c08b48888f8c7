"""Writes demo radiographs as DICOM Digital X-Ray files (pydicom) and as 8-bit grey PNG pictures."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from PIL import Image
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.uid import DigitalXRayImageStorageForPresentation, ExplicitVRLittleEndian, generate_uid

from demo_cases.scenario import MAX_VALUE

# Fixed, made-up acquisition date and time so that reruns give identical bytes.
STUDY_DATE, STUDY_TIME = "20260105", "093000"


def demo_uid(seed: int, *parts: object) -> str:
    """A UID under pydicom's root, derived from the seed and parts (same inputs give the same UID)."""
    return str(generate_uid(entropy_srcs=["casefile-demo", str(seed), *map(str, parts)]))


def _check(img: np.ndarray) -> np.ndarray:
    arr = np.asarray(img)
    if arr.ndim != 2 or arr.dtype not in (np.uint16, np.uint8):
        raise ValueError(f"expected a 2-D uint16/uint8 picture, got {arr.dtype} {arr.shape}")
    return arr


def write_dicom(
    path: str | Path,
    img: np.ndarray,
    *,
    case_no: int,
    seed: int = 7,
    lot: str = "Lot7",
    spacing_mm: float = 0.1,
    window: tuple[float, float] = (2048.0, 4096.0),
    burned_in: bool = False,
) -> Path:
    """Write a DX (Digital X-Ray, For Presentation) file: MONOCHROME2, 16 bits allocated, 12 stored.

    The "patient" is a casting: PatientID "PART-<lot>-<case_no>" and PatientName "Casting^<lot>" are
    made up, present only so that an identifier policy has something to remove. UIDs are derived from
    seed and case_no. burned_in sets Burned In Annotation (a corner marker is burned-in text). The default window (centre 2048, width 4096) maps the 12-bit range onto 0..1.
    """
    arr = _check(img).astype(np.uint16)
    path = Path(path)
    sop_uid = demo_uid(seed, "sop", case_no)
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = DigitalXRayImageStorageForPresentation
    meta.MediaStorageSOPInstanceUID = sop_uid
    meta.TransferSyntaxUID = ExplicitVRLittleEndian
    ds = Dataset()
    ds.file_meta = meta
    ds.SOPClassUID = DigitalXRayImageStorageForPresentation
    ds.SOPInstanceUID = sop_uid
    ds.StudyInstanceUID = demo_uid(seed, "study", case_no)
    ds.SeriesInstanceUID = demo_uid(seed, "series", case_no)
    ds.FrameOfReferenceUID = demo_uid(seed, "frame", case_no)
    ds.PatientName = f"Casting^{lot}"
    ds.PatientID = f"PART-{lot}-{case_no:04d}"
    ds.PatientBirthDate = ""
    ds.PatientSex = ""
    ds.StudyDate = ds.SeriesDate = ds.ContentDate = STUDY_DATE
    ds.StudyTime = ds.SeriesTime = ds.ContentTime = STUDY_TIME
    ds.AccessionNumber = f"A{case_no:06d}"
    ds.ReferringPhysicianName = ""
    ds.InstitutionName = "Example Foundry QA Lab"
    ds.StudyID = f"{case_no}"
    ds.SeriesNumber = 1
    ds.InstanceNumber = case_no
    ds.Modality = "DX"
    ds.Manufacturer = "casefile demo generator"
    ds.PresentationIntentType = "FOR PRESENTATION"
    ds.ImageType = ["ORIGINAL", "PRIMARY"]
    ds.PatientOrientation = ""
    ds.BodyPartExamined = ""
    ds.ImageLaterality = "U"
    ds.SamplesPerPixel = 1
    ds.PhotometricInterpretation = "MONOCHROME2"
    ds.Rows, ds.Columns = arr.shape
    ds.BitsAllocated = 16
    ds.BitsStored = 12
    ds.HighBit = 11
    ds.PixelRepresentation = 0
    ds.PixelIntensityRelationship = "LIN"
    ds.PixelIntensityRelationshipSign = 1
    ds.RescaleIntercept = 0
    ds.RescaleSlope = 1
    ds.RescaleType = "US"
    ds.BurnedInAnnotation = "YES" if burned_in else "NO"
    spacing = [f"{spacing_mm:g}", f"{spacing_mm:g}"]
    ds.ImagerPixelSpacing = spacing
    ds.PixelSpacing = spacing
    ds.WindowCenter = f"{window[0]:g}"
    ds.WindowWidth = f"{window[1]:g}"
    ds.PixelData = np.minimum(arr, MAX_VALUE).astype("<u2").tobytes()
    ds.save_as(path, enforce_file_format=True)
    return path


def to_8bit(img: np.ndarray) -> np.ndarray:
    """12-bit (uint16) -> uint8 by round(v * 255 / 4095); uint8 passes through."""
    arr = _check(img)
    if arr.dtype == np.uint8:
        return arr
    return np.round(np.minimum(arr, MAX_VALUE).astype(np.float64) * 255.0 / MAX_VALUE).astype(np.uint8)


def write_png(path: str | Path, img: np.ndarray) -> Path:
    """Write an 8-bit grey PNG (12-bit input is scaled to 0..255)."""
    path = Path(path)
    Image.fromarray(to_8bit(img)).save(path, format="PNG", optimize=False)
    return path
