"""DICOM bytes to a data set: Part 10 files and bare data sets; a deflated data set is inflated within a bound.

pydicom inflates a Deflated Explicit VR Little Endian data set (DICOM PS3.5 A.5) whole, with no limit,
before any attribute can be read, so a kilobyte of deflate stream could become gigabytes. Here the File
Meta Information (PS3.10 7.1) is read first; for that transfer syntax the data set is inflated a first
slice at a time until the Image Pixel attributes (group 0028, PS3.3 C.7.6.3) can be read and checked
against the limits, and then only as far as the pixels those attributes declare need, plus the
allowance for everything else (casefile.imaging.limits.NON_PIXEL_BYTES).
"""

from __future__ import annotations

import io
import zlib
from collections.abc import Callable

import pydicom
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.filereader import read_dataset, read_preamble
from pydicom.uid import DeflatedExplicitVRLittleEndian

from casefile.errors import InputError, one_line
from casefile.imaging.limits import NON_PIXEL_BYTES

# Attributes whose presence marks a no-meta file that pydicom parsed with force as a real data set.
_DICOM_MARKERS = ("SOPClassUID", "SOPInstanceUID", "Modality", "Rows", "StudyInstanceUID", "PixelData")
_SIZE_KEYWORDS = ("Rows", "Columns", "BitsAllocated")
_HEAD_STEPS = (64 * 1024, 1024 * 1024, 16 * 1024 * 1024)  # inflated bytes tried for the image attributes

HeaderCheck = Callable[[Dataset], int]  # checks a header's declared size; returns the pixel bytes it needs


def is_part10(data: bytes) -> bool:
    """PS3.10 7.1: a 128-byte preamble, then "DICM"."""
    return len(data) >= 132 and data[128:132] == b"DICM"


def _file_meta(data: bytes) -> tuple[FileMetaDataset | None, int]:
    """The File Meta Information group (0002) and where the data set starts; (None, 0) if there is none."""
    fp = io.BytesIO(data)
    try:
        read_preamble(fp, True)
        if data[fp.tell():fp.tell() + 2] != b"\x02\x00":
            return None, 0
        meta = read_dataset(fp, False, True, stop_when=lambda tag, _vr, _length: tag.group != 2)
    except Exception:
        return None, 0
    return FileMetaDataset(meta), fp.tell()


def _inflate(stream: bytes, limit: int, name: str) -> tuple[bytes, bool]:
    """At most ``limit`` inflated bytes; True when that was the whole stream."""
    inflater = zlib.decompressobj(-zlib.MAX_WBITS)
    try:
        out = inflater.decompress(stream, limit)
    except zlib.error as exc:
        raise InputError(f"{name}: deflated data set is damaged ({exc})") from None
    return out, inflater.eof


def _read_deflated(meta: FileMetaDataset, stream: bytes, name: str, check: HeaderCheck) -> Dataset:
    for step in _HEAD_STEPS:
        head, whole = _inflate(stream, step, name)
        try:
            header = read_dataset(io.BytesIO(head), False, True,
                                  stop_when=lambda tag, _vr, _length: tag.group > 0x0028)
        except Exception:
            header = Dataset()
        if all(k in header for k in _SIZE_KEYWORDS) or whole:
            break
    if not all(k in header for k in _SIZE_KEYWORDS):
        raise InputError(f"{name}: deflated data set: no Rows, Columns and Bits Allocated within its first "
                         f"{_HEAD_STEPS[-1] // (1024 * 1024)} MiB")
    header.file_meta = meta
    bound = check(header) + NON_PIXEL_BYTES
    body, whole = _inflate(stream, bound, name)
    if not whole:
        raise InputError(f"{name}: deflated data set inflates to more than {bound / 1e6:.1f} MB, more than "
                         "the image it declares needs")
    try:
        ds = read_dataset(io.BytesIO(body), False, True)
    except Exception:
        raise InputError(f"{name}: deflated data set cannot be parsed after inflating") from None
    ds.file_meta = meta
    ds.set_original_encoding(False, True)
    return ds


def parse_dicom(data: bytes, name: str, check: HeaderCheck) -> Dataset | None:
    """A data set if the bytes are DICOM (Part 10, or a bare data set pydicom can parse), else None.

    ``check`` is called on a deflated data set's header before it is inflated past it.
    """
    part10 = is_part10(data)
    meta, start = _file_meta(data)
    if meta is not None and str(meta.get("TransferSyntaxUID", "")).strip() == DeflatedExplicitVRLittleEndian:
        return _read_deflated(meta, data[start:], name, check)
    try:
        ds = pydicom.dcmread(io.BytesIO(data), force=True)
    except Exception as exc:
        if part10:
            raise InputError(f"{name}: DICOM file is damaged and cannot be parsed ({one_line(exc, limit=120)})") from None
        return None
    if part10:
        return ds
    try:
        recognised = sum(1 for k in _DICOM_MARKERS if k in ds)
    except Exception:
        return None
    return ds if recognised >= 2 else None
