"""Input loading: DICOM and raster files become a Scan (model input, display picture, digests, no identifiers)."""

from __future__ import annotations

import hashlib
import io
import logging
import os
import warnings
from pathlib import Path
from typing import Any

import pydicom
from PIL import Image

from casefile.errors import CasefileError, InputError
from casefile.imaging.dicom import load_dicom
from casefile.imaging.identity import ANNEX_E_IDENTIFIERS, SAFE_ATTRIBUTES, load_site_key, pseudonym
from casefile.imaging.raster import load_raster
from casefile.imaging.scan import Scan, pixel_digest
from casefile.imaging.voi import (
    apply_window,
    lut_lookup,
    minmax_window,
    rescale,
    window_linear,
    window_linear_exact,
    window_sigmoid,
)

__all__ = [
    "ANNEX_E_IDENTIFIERS", "SAFE_ATTRIBUTES", "Scan", "apply_window", "load", "load_site_key", "lut_lookup",
    "minmax_window", "pixel_digest", "pseudonym", "rescale", "window_linear", "window_linear_exact",
    "window_sigmoid",
]

UID_POLICIES = ("keep-uids", "drop-uids")
# Attributes whose presence marks a no-meta file that pydicom parsed with force as a real data set.
_DICOM_MARKERS = ("SOPClassUID", "SOPInstanceUID", "Modality", "Rows", "StudyInstanceUID", "PixelData")


def _read_bytes(path: Path, name: str) -> bytes:
    try:
        return path.read_bytes()
    except FileNotFoundError:
        raise InputError(f"{name}: file not found") from None
    except IsADirectoryError:
        raise InputError(f"{name}: is a folder, not a file") from None
    except PermissionError:
        raise InputError(f"{name}: permission denied") from None
    except OSError as exc:
        raise InputError(f"{name}: cannot be read ({exc.strerror or exc})") from None


def _parse_dicom(data: bytes, name: str) -> pydicom.Dataset | None:
    """A data set if the bytes are DICOM (Part 10 preamble, or a bare data set pydicom can parse)."""
    part10 = len(data) >= 132 and data[128:132] == b"DICM"
    try:
        ds = pydicom.dcmread(io.BytesIO(data), force=True)
    except Exception:
        if part10:
            raise InputError(f"{name}: DICOM file is damaged and cannot be parsed") from None
        return None
    if part10:
        return ds
    try:
        recognised = sum(1 for k in _DICOM_MARKERS if k in ds)
    except Exception:
        return None
    return ds if recognised >= 2 else None


def _is_raster(data: bytes) -> bool:
    try:
        with Image.open(io.BytesIO(data)):
            return True
    except Exception:
        return False


def load(
    path: str | os.PathLike[str],
    *,
    frame: int | None = None,
    key: str | os.PathLike[str] | None = None,
    window: dict[str, Any] | str | None = None,
    uid_policy: str = "keep-uids",
) -> Scan:
    """Load one DICOM or raster file as a Scan.

    ``frame``: 0-based frame of a multi-frame file (required there). ``key``: path of the site key
    file used for the pseudonym (default ``$CASEFILE_SITE_KEY`` or ``~/.config/casefile/site.key``).
    ``window``: ``"file"`` (default: the file's VOI LUT or window, else the data range), ``"minmax"``,
    or ``{"center": c, "width": w, "function": "LINEAR" | "LINEAR_EXACT" | "SIGMOID"}``.
    ``uid_policy``: ``"keep-uids"`` or ``"drop-uids"``. Any problem raises InputError with one line.
    """
    p = Path(path)
    name = p.name or str(path)
    if uid_policy not in UID_POLICIES:
        raise InputError(f"{name}: uid_policy must be one of {', '.join(UID_POLICIES)}")
    if frame is not None and (isinstance(frame, bool) or not isinstance(frame, int)):
        raise InputError(f"{name}: frame must be a whole number")
    data = _read_bytes(p, name)
    file_sha256 = hashlib.sha256(data).hexdigest()
    notes: list[str] = []
    pydicom_logger = logging.getLogger("pydicom")
    level = pydicom_logger.level
    pydicom_logger.setLevel(logging.CRITICAL)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            if not data:
                raise InputError(f"{name}: file is empty")
            part10 = len(data) >= 132 and data[128:132] == b"DICM"
            ds = _parse_dicom(data, name) if part10 or not _is_raster(data) else None
            if ds is not None:
                return load_dicom(ds, name=name, file_sha256=file_sha256, frame=frame, key=key,
                                  window=window, uid_policy=uid_policy, notes=notes)
            if not _is_raster(data):
                raise InputError(f"{name}: not a DICOM or raster image file")
            return load_raster(data, name=name, file_sha256=file_sha256, frame=frame, notes=notes)
    except CasefileError:
        raise
    except Exception as exc:  # last guard: a damaged file must never surface as a traceback
        raise InputError(f"{name}: cannot be read ({type(exc).__name__})") from None
    finally:
        pydicom_logger.setLevel(level)
