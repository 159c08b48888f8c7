"""Test helpers: bundled pydicom files and a writer of small synthetic DICOM files."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from pydicom.data import get_testdata_file
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.uid import ExplicitVRLittleEndian, SecondaryCaptureImageStorage, generate_uid


def bundled(name: str) -> str:
    """Path of a test file shipped inside the pydicom wheel (never downloaded)."""
    path = get_testdata_file(name, download=False)
    assert path is not None, f"{name} is not bundled with this pydicom"
    return str(path)


def write_dicom(path: Path, stored: np.ndarray, **attrs: object) -> Path:
    """Write a small uncompressed DICOM file from a stored-value array (one frame or [F, H, W])."""
    stored = np.ascontiguousarray(stored)
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = SecondaryCaptureImageStorage
    meta.MediaStorageSOPInstanceUID = generate_uid()
    meta.TransferSyntaxUID = ExplicitVRLittleEndian
    ds = Dataset()
    ds.file_meta = meta
    ds.SOPClassUID = SecondaryCaptureImageStorage
    ds.SOPInstanceUID = meta.MediaStorageSOPInstanceUID
    ds.StudyInstanceUID = generate_uid()
    ds.SeriesInstanceUID = generate_uid()
    ds.Modality = "OT"
    if stored.ndim == 3:
        ds.NumberOfFrames = stored.shape[0]
    ds.Rows, ds.Columns = stored.shape[-2:]
    ds.SamplesPerPixel = 1
    ds.PhotometricInterpretation = "MONOCHROME2"
    ds.BitsAllocated = stored.dtype.itemsize * 8
    ds.BitsStored = ds.BitsAllocated
    ds.HighBit = ds.BitsAllocated - 1
    ds.PixelRepresentation = 1 if stored.dtype.kind == "i" else 0
    for keyword, value in attrs.items():
        if value is None:
            if keyword in ds:
                delattr(ds, keyword)
        else:
            setattr(ds, keyword, value)
    ds.PixelData = stored.astype(stored.dtype.newbyteorder("<")).tobytes()
    ds.save_as(path, enforce_file_format=True)
    return path
