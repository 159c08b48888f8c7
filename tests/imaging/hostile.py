"""Builders of small hostile inputs: files of a few kilobytes that declare (or inflate to) enormous images.

Layouts, from the standards:
* PNG: W3C PNG (ISO/IEC 15948) §5.2 signature, §5.3 chunk = length, type, data, CRC-32 over type and
  data; §11.2.2 IHDR (width, height, bit depth, colour type, compression, filter, interlace); §7.2 each
  scanline is a filter-type byte then the samples; IDAT holds the zlib stream.
* DICOM: PS3.10 7.1 (preamble, "DICM", File Meta Information), PS3.5 A.4 (encapsulated Pixel Data:
  a Basic Offset Table item, then one fragment per frame), PS3.5 G.3-G.5 (RLE: a 64-byte header with
  the segment count and offsets, then PackBits-style runs: a byte n in -127..-1 repeats the next byte
  1 - n times), PS3.5 A.5 (Deflated Explicit VR Little Endian: the data set after the File Meta
  Information is a raw deflate stream).
* JPEG: ITU-T T.81 B.2.2 frame header (SOF0: Lf, P, Y, X, Nf).
"""

from __future__ import annotations

import io
import struct
import zlib
from pathlib import Path

import numpy as np
from PIL import Image
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.encaps import encapsulate
from pydicom.filebase import DicomBytesIO
from pydicom.filewriter import write_dataset, write_file_meta_info
from pydicom.uid import (
    DeflatedExplicitVRLittleEndian,
    ExplicitVRLittleEndian,
    SecondaryCaptureImageStorage,
    generate_uid,
)


def _chunk(kind: bytes, data: bytes) -> bytes:
    return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))


def zero_png(path: Path, width: int, height: int) -> Path:
    """An 8-bit grey PNG of zeros, compressed row by row (never held whole in memory)."""
    squeeze = zlib.compressobj(9)
    row = b"\x00" * (width + 1)  # filter type 0 (None), then the zero samples
    parts = [squeeze.compress(row) for _ in range(height)]
    parts.append(squeeze.flush())
    ihdr = struct.pack(">IIBBBBB", width, height, 8, 0, 0, 0, 0)  # bit depth 8, colour type 0 (grey)
    path.write_bytes(b"\x89PNG\r\n\x1a\n" + _chunk(b"IHDR", ihdr) + _chunk(b"IDAT", b"".join(parts))
                     + _chunk(b"IEND", b""))
    return path


def _image_dataset(rows: int, columns: int, *, spp: int = 1, bits: int = 8, frames: int = 1) -> Dataset:
    ds = Dataset()
    ds.SOPClassUID = SecondaryCaptureImageStorage
    ds.SOPInstanceUID = generate_uid()
    ds.StudyInstanceUID = generate_uid()
    ds.Modality = "OT"
    ds.PatientID = "HOSTILE-1"
    ds.Rows, ds.Columns = rows, columns
    ds.SamplesPerPixel = spp
    ds.PhotometricInterpretation = "MONOCHROME2" if spp == 1 else "RGB"
    if spp == 3:
        ds.PlanarConfiguration = 0
    ds.BitsAllocated = bits
    ds.BitsStored = bits
    ds.HighBit = bits - 1
    ds.PixelRepresentation = 0
    if frames > 1:
        ds.NumberOfFrames = frames
    return ds


def _meta(ds: Dataset, tsuid: str) -> FileMetaDataset:
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = ds.SOPClassUID
    meta.MediaStorageSOPInstanceUID = ds.SOPInstanceUID
    meta.TransferSyntaxUID = tsuid
    return meta


def encapsulated_dicom(path: Path, tsuid: str, frame: bytes, rows: int, columns: int, **kw: int) -> Path:
    """A Part 10 file whose one frame is ``frame`` under transfer syntax ``tsuid``."""
    ds = _image_dataset(rows, columns, **kw)
    ds.file_meta = _meta(ds, tsuid)
    ds.PixelData = encapsulate([frame])
    ds["PixelData"].VR = "OB"
    ds.save_as(path, enforce_file_format=True)
    return path


def native_dicom(path: Path, rows: int, columns: int, pixel_bytes: bytes, **kw: int) -> Path:
    """An Explicit VR Little Endian file whose Pixel Data is ``pixel_bytes`` (whatever Rows x Columns say)."""
    ds = _image_dataset(rows, columns, **kw)
    ds.file_meta = _meta(ds, ExplicitVRLittleEndian)
    ds.PixelData = pixel_bytes
    ds["PixelData"].VR = "OB"
    ds.save_as(path, enforce_file_format=True)
    return path


def rle_frame() -> bytes:
    """One RLE segment of 128 zero bytes: header (1 segment at offset 64), then the run -127, 0."""
    header = struct.pack("<16I", 1, 64, *([0] * 14))
    return header + bytes([0x81, 0x00])


def jpeg_frame(width: int, height: int, declared: tuple[int, int] | None = None) -> bytes:
    """A baseline JPEG of zeros; with ``declared``, its SOF0 claims that (width, height) instead."""
    buf = io.BytesIO()
    Image.fromarray(np.zeros((height, width), np.uint8)).save(buf, "JPEG")
    data = bytearray(buf.getvalue())
    if declared is not None:
        at = data.find(b"\xff\xc0")
        data[at + 5:at + 9] = struct.pack(">HH", declared[1], declared[0])
    return bytes(data)


def deflated_dicom(path: Path, rows: int, columns: int, *, padding: int = 0) -> Path:
    """A Deflated Explicit VR Little Endian file of a rows x columns 8-bit image of zeros, followed by
    ``padding`` zero bytes of Data Set Trailing Padding (FFFC,FFFC), deflated chunk by chunk."""
    ds = _image_dataset(rows, columns)
    pixels = b"\x00" * min(rows * columns, 1 << 16)  # a short Pixel Data when the image is enormous
    ds.PixelData = pixels
    ds["PixelData"].VR = "OB"
    body = DicomBytesIO()
    body.is_little_endian, body.is_implicit_VR = True, False
    write_dataset(body, ds)
    head = DicomBytesIO()
    head.write(b"\x00" * 128 + b"DICM")
    write_file_meta_info(head, _meta(ds, DeflatedExplicitVRLittleEndian), enforce_standard=True)
    squeeze = zlib.compressobj(9, zlib.DEFLATED, -zlib.MAX_WBITS)
    parts = [squeeze.compress(body.getvalue())]
    if padding:
        parts.append(squeeze.compress(b"\xfc\xff\xfc\xffOB\x00\x00" + struct.pack("<I", padding)))
        block = b"\x00" * (1 << 20)
        for _ in range(padding // len(block)):
            parts.append(squeeze.compress(block))
        parts.append(squeeze.compress(b"\x00" * (padding % len(block))))
    parts.append(squeeze.flush())
    path.write_bytes(head.getvalue() + b"".join(parts))
    return path
