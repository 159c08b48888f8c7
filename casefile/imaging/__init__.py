"""Input loading: DICOM and raster files become a Scan (model input, display picture, digests, no identifiers)."""

from __future__ import annotations

import hashlib
import io
import logging
import os
import warnings
from pathlib import Path
from typing import Any

from PIL import Image

from casefile.errors import CasefileError, InputError, one_line
from casefile.imaging.dicom import check_declared_size, load_dicom
from casefile.imaging.dicom_parse import is_part10, parse_dicom
from casefile.imaging.identity import ANNEX_E_IDENTIFIERS, SAFE_ATTRIBUTES, load_site_key, pseudonym
from casefile.imaging.limits import (
    Limits,
    check_file_bytes,
    check_png_header,
    pillow_held_to,
    pillow_refusal,
    resolve_limits,
)
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
    "ANNEX_E_IDENTIFIERS", "SAFE_ATTRIBUTES", "Limits", "Scan", "apply_window", "load", "load_site_key",
    "lut_lookup", "resolve_limits",
    "minmax_window", "pixel_digest", "pseudonym", "rescale", "window_linear", "window_linear_exact",
    "window_sigmoid",
]

UID_POLICIES = ("keep-uids", "drop-uids")


def _read_bytes(path: Path, name: str, limits: Limits) -> bytes:
    """The whole file, refused before reading when it is larger than any image within the limits."""
    try:
        with path.open("rb") as f:
            size = os.fstat(f.fileno()).st_size
            check_file_bytes(name, size, limits)
            data = f.read(size)
            grew = f.read(1)
    except FileNotFoundError:
        raise InputError(f"{name}: file not found") from None
    except IsADirectoryError:
        raise InputError(f"{name}: is a folder, not a file") from None
    except PermissionError:
        raise InputError(f"{name}: permission denied") from None
    except OSError as exc:
        raise InputError(f"{name}: cannot be read ({exc.strerror or exc})") from None
    if grew or len(data) != size:
        raise InputError(f"{name}: file changed size while it was being read")
    return data


def _open_raster(data: bytes, name: str, limits: Limits) -> Image.Image | None:
    """The file opened by Pillow (header only, nothing decoded), or None when Pillow does not know it."""
    check_png_header(data, name, limits)
    try:
        return Image.open(io.BytesIO(data))
    except Image.DecompressionBombError as exc:
        raise pillow_refusal(name, exc, limits) from None
    except Exception:
        return None


def load(
    path: str | os.PathLike[str],
    *,
    frame: int | None = None,
    key: str | os.PathLike[str] | None = None,
    window: dict[str, Any] | str | None = None,
    uid_policy: str = "keep-uids",
    max_pixels: int | None = None,
    max_file_pixels: int | None = None,
) -> Scan:
    """Load one DICOM or raster file as a Scan.

    ``frame``: 0-based frame of a multi-frame file (required there). ``key``: path of the site key
    file used for the pseudonym (default ``$CASEFILE_SITE_KEY`` or ``~/.config/casefile/site.key``).
    ``window``: ``"file"`` (default: the file's VOI LUT or window, else the data range), ``"minmax"``,
    or ``{"center": c, "width": w, "function": "LINEAR" | "LINEAR_EXACT" | "SIGMOID"}``.
    ``uid_policy``: ``"keep-uids"`` or ``"drop-uids"``. ``max_pixels`` (per frame) and
    ``max_file_pixels`` (per file, samples of all frames): the size limits, checked from the header
    before any pixel is decoded (default: the site settings; see casefile.imaging.limits). Any problem
    raises InputError with one line.
    """
    p = Path(path)
    name = p.name or str(path)
    if uid_policy not in UID_POLICIES:
        raise InputError(f"{name}: uid_policy must be one of {', '.join(UID_POLICIES)}")
    if frame is not None and (isinstance(frame, bool) or not isinstance(frame, int)):
        raise InputError(f"{name}: frame must be a whole number")
    limits = resolve_limits(max_pixels, max_file_pixels)
    data = _read_bytes(p, name, limits)
    file_sha256 = hashlib.sha256(data).hexdigest()
    notes: list[str] = []
    pydicom_logger = logging.getLogger("pydicom")
    level = pydicom_logger.level
    pydicom_logger.setLevel(logging.CRITICAL)
    try:
        with warnings.catch_warnings(), pillow_held_to(limits):
            warnings.simplefilter("ignore")
            if not data:
                raise InputError(f"{name}: file is empty")
            img = None if is_part10(data) else _open_raster(data, name, limits)
            if img is not None:
                return load_raster(img, name=name, file_sha256=file_sha256, frame=frame, notes=notes,
                                   limits=limits)
            ds = parse_dicom(data, name, lambda header: check_declared_size(header, name, limits))
            if ds is None:
                raise InputError(f"{name}: not a DICOM or raster image file")
            return load_dicom(ds, name=name, file_sha256=file_sha256, frame=frame, key=key,
                              window=window, uid_policy=uid_policy, notes=notes, limits=limits)
    except CasefileError:
        raise
    except Exception as exc:  # last guard: a damaged file must never surface as a traceback
        text = one_line(exc, limit=120)
        shown = type(exc).__name__ + (f": {text}" if text != type(exc).__name__ else "")
        raise InputError(f"{name}: cannot be read ({shown})") from None
    finally:
        pydicom_logger.setLevel(level)
