"""DICOM loading: decode pixels, apply Modality LUT and VOI (PS3.3 C.11), build a Scan without identifiers."""

from __future__ import annotations

import os
from typing import Any

import numpy as np
import pydicom.uid as uids
from pydicom.dataset import Dataset, FileMetaDataset
from pydicom.encaps import get_frame
from pydicom.multival import MultiValue
from pydicom.pixels import apply_color_lut, convert_color_space, get_decoder

from casefile.errors import InputError, one_line
from casefile.imaging import voi
from casefile.imaging.attributes import as_float, as_int, first, lookup, safe_metadata
from casefile.imaging.codestream import j2k_size, jpeg_size
from casefile.imaging.identity import load_site_key, pseudonym
from casefile.imaging.limits import Limits, check_file, check_frame
from casefile.imaging.scan import Scan, pixel_digest

PIXEL_KEYWORDS = ("PixelData", "FloatPixelData", "DoubleFloatPixelData")
GREY = ("MONOCHROME1", "MONOCHROME2")
# What casefile decodes, by transfer syntax (PS3.5 Annex A): native and deflated pixel data, RLE
# (PS3.5 Annex G; the decoder sizes its output from Rows x Columns), and the JPEG family, whose frames
# are checked for the size they declare inside themselves (casefile.imaging.codestream).
_CODESTREAM_READERS = {
    **{ts: jpeg_size for ts in (*uids.JPEGTransferSyntaxes, *uids.JPEGLSTransferSyntaxes)},
    **{ts: j2k_size for ts in uids.JPEG2000TransferSyntaxes},
}
DECODED_SYNTAXES = frozenset([*uids.UncompressedTransferSyntaxes, *uids.RLETransferSyntaxes, *_CODESTREAM_READERS])
# PS3.3 C.7.6.3.1.1: 1 for MONOCHROME1/2 and PALETTE COLOR, 3 for RGB and YBR; PS3.5 8.1.1: Bits Allocated
# is 1 or a multiple of 8 (at most 64, Double Float Pixel Data).
SAMPLES_PER_PIXEL = (1, 3)


def _transfer_syntax(ds: Dataset, name: str, notes: list[str]) -> str:
    meta = getattr(ds, "file_meta", None)
    tsuid = meta.get("TransferSyntaxUID") if meta is not None else None
    if tsuid:
        return str(tsuid)
    implicit, little = getattr(ds, "original_encoding", (None, None))
    if implicit is None:
        raise InputError(f"{name}: DICOM file has no Transfer Syntax UID and its encoding is unknown")
    if implicit:
        tsuid = uids.ImplicitVRLittleEndian
    else:
        tsuid = uids.ExplicitVRLittleEndian if little else uids.ExplicitVRBigEndian
    ds.file_meta = getattr(ds, "file_meta", None) or FileMetaDataset()
    ds.file_meta.TransferSyntaxUID = tsuid
    notes.append("no File Meta Information: transfer syntax inferred from the data set encoding")
    return str(tsuid)


def check_transfer_syntax(tsuid: str, name: str) -> None:
    """Refuse, before decoding, a transfer syntax that is unknown or that casefile does not decode."""
    uid = uids.UID(tsuid)
    if not uid.is_transfer_syntax:
        raise InputError(f"{name}: unknown or unsupported transfer syntax UID {tsuid}")
    if uid not in DECODED_SYNTAXES:
        raise InputError(f"{name}: unsupported transfer syntax {tsuid} ({uid.name}); casefile decodes native, "
                         "deflated, RLE, JPEG, JPEG-LS and JPEG 2000 pixel data")


def check_declared_size(ds: Dataset, name: str, limits: Limits) -> int:
    """Check Rows x Columns x Samples per Pixel x Number of Frames (PS3.3 C.7.6.3, C.7.6.6) against the
    limits before any pixel is decoded; return the bytes the native pixel data of all frames takes."""
    rows, cols = as_int(ds, "Rows", name), as_int(ds, "Columns", name)
    spp = as_int(ds, "SamplesPerPixel", name, default=1)
    frames = as_int(ds, "NumberOfFrames", name, default=1)
    bits = as_int(ds, "BitsAllocated", name)
    if frames < 1:
        raise InputError(f"{name}: invalid Number of Frames value {frames}")
    if spp not in SAMPLES_PER_PIXEL:
        raise InputError(f"{name}: Samples per Pixel is {spp}; casefile reads 1 (grey, palette) or 3 (colour)")
    if bits < 1 or bits > 64 or (bits != 1 and bits % 8):
        raise InputError(f"{name}: Bits Allocated is {bits}; DICOM allows 1 or a multiple of 8 up to 64")
    check_frame(name, cols, rows, limits)
    check_file(name, cols, rows, spp, frames, limits)
    return (rows * cols * spp * frames * bits + 7) // 8


def _check_codestream(ds: Dataset, name: str, tsuid: str, frames: int, index: int) -> None:
    """A JPEG-family frame must declare the data set's own Columns x Rows and Samples per Pixel."""
    reader = _CODESTREAM_READERS.get(uids.UID(tsuid))
    if reader is None or "PixelData" not in ds:
        return
    try:
        data = get_frame(ds.PixelData, index, number_of_frames=frames)
    except Exception as exc:
        raise InputError(f"{name}: encapsulated Pixel Data cannot be split into frames ({one_line(exc, limit=120)})") from None
    declared = reader(data)
    rows, cols = as_int(ds, "Rows", name), as_int(ds, "Columns", name)
    spp = as_int(ds, "SamplesPerPixel", name, default=1)
    if declared is None:
        raise InputError(f"{name}: frame {index}: no image header found in its {uids.UID(tsuid).name} data")
    if declared != (cols, rows, spp):
        w, h, c = declared
        raise InputError(f"{name}: frame {index}: its {uids.UID(tsuid).name} data declares {w} x {h} with {c} "
                         f"component(s), but the data set declares {cols} x {rows} with {spp} (Columns x Rows, "
                         "Samples per Pixel); not decoded")


def _check_native_length(ds: Dataset, name: str, tsuid: str, frames: int, expected: int) -> None:
    if uids.UID(tsuid).is_compressed or "PixelData" not in ds:
        return
    spp = as_int(ds, "SamplesPerPixel", name, default=1)
    if spp == 3 and str(ds.get("PhotometricInterpretation", "")).strip() == "YBR_FULL_422":
        expected = expected * 2 // 3
    got = len(ds.PixelData)
    if got < expected:
        raise InputError(f"{name}: Pixel Data is truncated ({got} of {expected} bytes)")


def _decode(ds: Dataset, name: str, tsuid: str, index: int | None) -> tuple[np.ndarray, str]:
    try:
        decoder = get_decoder(tsuid)
    except Exception as exc:
        raise InputError(f"{name}: unsupported transfer syntax {tsuid} ({one_line(exc, limit=120)})") from None
    if not decoder.is_available:
        raise InputError(f"{name}: no decoder installed for transfer syntax {tsuid}")
    try:
        arr, meta = decoder.as_array(ds, index=index, raw=True)
    except Exception as exc:
        raise InputError(f"{name}: pixel data cannot be decoded ({one_line(exc, limit=120)})") from None
    photometric = str(meta.get("photometric_interpretation") or ds.get("PhotometricInterpretation", ""))
    return arr, photometric.strip()


def _modality_values(ds: Dataset, arr: np.ndarray, frame: int, notes: list[str]) -> np.ndarray:
    """Modality LUT (PS3.3 C.11.1): the Modality LUT Sequence if present, else Rescale Slope/Intercept."""
    if arr.dtype.kind == "f":
        return arr.astype(np.float64)  # Float Pixel Data carries modality values already
    seq = ds.get("ModalityLUTSequence")
    if seq:
        item = seq[0]
        descriptor = [int(v) for v in item.LUTDescriptor]
        notes.append("Modality LUT Sequence applied")
        return voi.lut_lookup(arr, descriptor, _lut_data(ds, item, descriptor))
    slope = as_float(lookup(ds, frame, "PixelValueTransformationSequence", "RescaleSlope"))
    intercept = as_float(lookup(ds, frame, "PixelValueTransformationSequence", "RescaleIntercept"))
    if slope == 0:
        notes.append("Rescale Slope is 0; treated as 1")
        slope = None
    return voi.rescale(arr, 1.0 if slope is None else slope, 0.0 if intercept is None else intercept)


def _lut_data(ds: Dataset, item: Dataset, descriptor: list[int]) -> np.ndarray:
    value = item.LUTData
    if isinstance(value, bytes):
        order = "<" if getattr(ds, "is_little_endian", True) is not False else ">"
        return np.frombuffer(value, dtype=f"{order}u{1 if descriptor[2] == 8 and len(value) == descriptor[0] else 2}")
    return np.asarray(value if isinstance(value, (list, tuple)) else [value], dtype=np.float64)


def _window_from_file(ds: Dataset, values: np.ndarray, frame: int, notes: list[str]) -> tuple[np.ndarray, dict]:
    seq = ds.get("VOILUTSequence")
    if seq:
        item = seq[0]
        descriptor = [int(v) for v in item.LUTDescriptor]
        table = _lut_data(ds, item, descriptor)
        top = float(2 ** int(descriptor[2]) - 1)
        top = max(top, float(np.max(table)))
        unit = voi.lut_lookup(values, descriptor, table) / top
        return unit, {"source": "file-lut", "lut_entries": descriptor[0], "lut_first": descriptor[1],
                      "lut_bits": descriptor[2]}
    center = lookup(ds, frame, "FrameVOILUTSequence", "WindowCenter")
    width = lookup(ds, frame, "FrameVOILUTSequence", "WindowWidth")
    function = lookup(ds, frame, "FrameVOILUTSequence", "VOILUTFunction")
    c, w = as_float(center), as_float(width)
    if c is None or w is None:
        return _minmax(values, notes)
    if isinstance(center, MultiValue) and len(center) > 1:
        notes.append(f"file gives {len(center)} windows; the first is used")
    fn = str(first(function) or "LINEAR").strip().upper() or "LINEAR"
    try:
        unit = voi.apply_window(values, c, w, fn)
    except ValueError as exc:
        notes.append(f"window in the file is not usable ({exc}); data range used instead")
        return _minmax(values, notes)
    return unit, {"source": "file", "center": c, "width": w, "function": fn}


def _minmax(values: np.ndarray, notes: list[str]) -> tuple[np.ndarray, dict]:
    c, w = voi.minmax_window(values)
    if w <= 0:
        notes.append("all pixels have the same value; shown black")
        return np.zeros_like(values, dtype=np.float64), {"source": "minmax", "center": c, "width": 0.0,
                                                         "function": "LINEAR_EXACT"}
    return voi.window_linear_exact(values, c, w), {"source": "minmax", "center": c, "width": w,
                                                   "function": "LINEAR_EXACT"}


def _window_from_argument(values: np.ndarray, window: dict, name: str) -> tuple[np.ndarray, dict]:
    try:
        c, w = float(window["center"]), float(window["width"])
        fn = str(window.get("function", "LINEAR")).strip().upper()
        unit = voi.apply_window(values, c, w, fn)
    except (KeyError, TypeError, ValueError) as exc:
        raise InputError(f"{name}: window argument not usable ({one_line(exc, limit=120)})") from None
    return unit, {"source": "argument", "center": c, "width": w, "function": fn}


def _grey(ds: Dataset, arr: np.ndarray, photometric: str, frame: int, window: Any, name: str,
          notes: list[str]) -> tuple[np.ndarray, str, dict]:
    values = _modality_values(ds, arr, frame, notes)
    if not np.all(np.isfinite(values)):
        raise InputError(f"{name}: pixel values include NaN or infinity")
    digest = pixel_digest(values[np.newaxis])
    if window is None or window == "file":
        unit, info = _window_from_file(ds, values, frame, notes)
    elif window == "minmax":
        unit, info = _minmax(values, notes)
    elif isinstance(window, dict):
        unit, info = _window_from_argument(values, window, name)
    else:
        raise InputError(f"{name}: window must be 'file', 'minmax' or a dict with center and width")
    if photometric == "MONOCHROME1":
        unit = 1.0 - unit  # PS3.3 C.7.6.3.1.2: minimum value is white; inverted after the VOI
        notes.append("MONOCHROME1: inverted for display after the window")
    return unit[np.newaxis], digest, info


def _colour(ds: Dataset, arr: np.ndarray, photometric: str, name: str, notes: list[str]) -> tuple[np.ndarray, str]:
    if photometric == "PALETTE COLOR":
        try:
            arr = apply_color_lut(arr, ds)
        except Exception as exc:
            raise InputError(f"{name}: palette colour table not usable ({one_line(exc, limit=120)})") from None
        top = 255.0 if arr.dtype == np.uint8 else 65535.0
        notes.append("PALETTE COLOR converted to RGB")
    else:
        if photometric.startswith("YBR_FULL"):
            arr = convert_color_space(arr, photometric, "RGB")
            notes.append(f"{photometric} converted to RGB")
        elif photometric != "RGB":
            raise InputError(f"{name}: unsupported Photometric Interpretation {photometric!r}")
        top = float(2 ** as_int(ds, "BitsStored", name, default=8) - 1)
    rgb = np.moveaxis(np.asarray(arr, dtype=np.float64), -1, 0)
    return np.clip(rgb / top, 0.0, 1.0), pixel_digest(rgb)


def _spacing(ds: Dataset, frame: int, notes: list[str]) -> tuple[float, float] | None:
    value = lookup(ds, frame, "PixelMeasuresSequence", "PixelSpacing")
    if value is None and "ImagerPixelSpacing" in ds:
        value = ds.get("ImagerPixelSpacing")
        notes.append("spacing is Imager Pixel Spacing (at the detector, not corrected for magnification)")
    try:
        row, col = (float(v) for v in value)
    except (TypeError, ValueError):
        return None
    return (row, col) if row > 0 and col > 0 and np.isfinite([row, col]).all() else None


def _uid(ds: Dataset, keyword: str) -> str | None:
    value = str(ds.get(keyword, "") or "").strip()
    return value or None


def _pseudonym(ds: Dataset, key: str | os.PathLike[str] | None, notes: list[str]) -> str | None:
    patient_id = str(ds.get("PatientID", "") or "").strip()
    if patient_id:
        return pseudonym(load_site_key(key), patient_id)
    study = _uid(ds, "StudyInstanceUID")
    if study:
        notes.append("no Patient ID: pseudonym made from the Study Instance UID")
        return pseudonym(load_site_key(key), study)
    notes.append("no Patient ID or Study Instance UID: no pseudonym")
    return None


def load_dicom(ds: Dataset, *, name: str, file_sha256: str, frame: int | None, key: Any, window: Any,
               uid_policy: str, notes: list[str], limits: Limits) -> Scan:
    """Build a Scan from a parsed data set (see casefile.imaging.load for the arguments).

    Nothing is decoded before the transfer syntax, the declared size (against ``limits``) and, for the
    JPEG family, the size the frame's own codestream declares have been checked.
    """
    if not any(k in ds for k in PIXEL_KEYWORDS):
        raise InputError(f"{name}: DICOM file has no Pixel Data")
    tsuid = _transfer_syntax(ds, name, notes)
    check_transfer_syntax(tsuid, name)
    expected = check_declared_size(ds, name, limits)
    frames = as_int(ds, "NumberOfFrames", name, default=1)
    if frames > 1 and frame is None:
        raise InputError(f"{name}: multi-frame file with {frames} frames; choose one with frame=N (0-based)")
    if frame is not None and not 0 <= frame < frames:
        raise InputError(f"{name}: frame {frame} out of range; the file has {frames} frame(s)")
    index = frame or 0
    _check_native_length(ds, name, tsuid, frames, expected)
    _check_codestream(ds, name, tsuid, frames, index)
    arr, photometric = _decode(ds, name, tsuid, frame if frames > 1 else None)
    info = None
    if arr.ndim == 2 and photometric == "PALETTE COLOR":
        unit, digest = _colour(ds, arr, photometric, name, notes)
    elif arr.ndim == 2:
        if photometric not in GREY:
            notes.append(f"Photometric Interpretation {photometric or 'missing'!r}; shown as MONOCHROME2")
            photometric = "MONOCHROME2"
        unit, digest, info = _grey(ds, arr, photometric, index, window, name, notes)
    elif arr.ndim == 3 and arr.shape[-1] == 3:
        unit, digest = _colour(ds, arr, photometric, name, notes)
    else:
        raise InputError(f"{name}: unexpected pixel array shape {arr.shape}")
    modality = str(ds.get("Modality", "") or "").strip()
    if not modality:
        modality = "OT"
        notes.append("Modality missing; recorded as OT (other)")
    metadata, meta_notes = safe_metadata(ds, tsuid)
    notes.extend(meta_notes)
    keep = uid_policy == "keep-uids"
    display = voi.to_display(unit)
    spacing = _spacing(ds, index, notes)
    pseudo = _pseudonym(ds, key, notes)
    return Scan(
        pixels=unit.astype(np.float32), display=display[0] if display.shape[0] == 1 else np.moveaxis(display, 0, -1),
        file_sha256=file_sha256, pixel_sha256=digest, width=int(unit.shape[2]), height=int(unit.shape[1]),
        channels=int(unit.shape[0]), spacing_mm=spacing, modality=modality, window=info,
        frame=frame, kind="dicom", file_name=name, notes=tuple(notes), pseudonym=pseudo,
        study_uid=_uid(ds, "StudyInstanceUID") if keep else None,
        series_uid=_uid(ds, "SeriesInstanceUID") if keep else None,
        sop_uid=_uid(ds, "SOPInstanceUID") if keep else None, metadata=metadata,
    )
