"""Raster loading (PNG, TIFF, JPEG, BMP … through Pillow): orientation, bit depth, colour mode → Scan."""

from __future__ import annotations

import numpy as np
from PIL import Image, ImageOps

from casefile.errors import InputError, one_line
from casefile.imaging.limits import Limits, check_file, check_frame
from casefile.imaging.scan import Scan, pixel_digest

SIXTEEN_BIT_MODES = ("I;16", "I;16L", "I;16B", "I;16N")
NOTE_CONVERTED = "{mode} image converted to RGB"


def _select_frame(img: Image.Image, frame: int | None, name: str, limits: Limits) -> None:
    """Check the declared size (first frame, then all frames, then the chosen one) and seek to the frame."""
    check_frame(name, img.size[0], img.size[1], limits)
    count = int(getattr(img, "n_frames", 1) or 1)  # read from headers (Pillow does not decode to count)
    check_file(name, img.size[0], img.size[1], len(img.getbands()), count, limits)
    if count > 1 and frame is None:
        raise InputError(f"{name}: multi-frame file with {count} frames; choose one with frame=N (0-based)")
    if frame is not None and not 0 <= frame < count:
        raise InputError(f"{name}: frame {frame} out of range; the file has {count} frame(s)")
    if frame:
        img.seek(frame)
        check_frame(name, img.size[0], img.size[1], limits)  # frames of one file may differ in size


def _to_array(img: Image.Image, name: str, notes: list[str]) -> tuple[np.ndarray, float]:
    """Decoded samples as float64 [H, W] or [H, W, 3] and the full-scale value they are divided by."""
    mode = img.mode
    if mode == "1":
        return np.asarray(img.convert("L"), dtype=np.float64), 255.0
    if mode == "L":
        return np.asarray(img, dtype=np.float64), 255.0
    if mode in SIXTEEN_BIT_MODES or mode == "I":
        arr = np.asarray(img).astype(np.float64)
        if arr.size and (arr.min() < 0 or arr.max() > 65535):
            raise InputError(f"{name}: 32-bit integer samples outside 0..65535 are not supported")
        return arr, 65535.0
    if mode == "LA":
        notes.append("alpha channel dropped")
        return np.asarray(img.convert("L"), dtype=np.float64), 255.0
    if mode == "P":
        has_alpha = "transparency" in img.info or (img.palette is not None and img.palette.mode == "RGBA")
        if has_alpha:
            notes.append("alpha channel dropped")
        notes.append("palette image converted to RGB")
        return np.asarray(img.convert("RGB"), dtype=np.float64), 255.0
    if mode in ("RGBA", "PA", "RGBa", "La"):
        notes.append("alpha channel dropped")
        return np.asarray(img.convert("RGBA"), dtype=np.float64)[..., :3], 255.0
    if mode == "RGB":
        return np.asarray(img, dtype=np.float64), 255.0
    if mode in ("RGBX", "CMYK", "YCbCr", "LAB", "HSV"):
        notes.append(NOTE_CONVERTED.format(mode=mode))
        return np.asarray(img.convert("RGB"), dtype=np.float64), 255.0
    raise InputError(f"{name}: unsupported image mode {mode!r}")


def load_raster(img: Image.Image, *, name: str, file_sha256: str, frame: int | None, notes: list[str],
                limits: Limits) -> Scan:
    """Build a Scan from a raster file Pillow has opened (header read, nothing decoded yet); the size the
    header declares is checked against ``limits`` before decoding. EXIF orientation is applied
    (PIL.ImageOps.exif_transpose)."""
    fmt = img.format or "raster"
    try:
        _select_frame(img, frame, name, limits)
        img.load()
        oriented = ImageOps.exif_transpose(img)
        if oriented is not img:
            orientation = img.getexif().get(0x0112)
            if orientation not in (None, 1):
                notes.append(f"EXIF orientation {orientation} applied")
        arr, top = _to_array(oriented, name, notes)
    except InputError:
        raise
    except Exception as exc:
        raise InputError(f"{name}: {fmt} image cannot be decoded ({one_line(exc, limit=120)})") from None
    if arr.ndim != 2 and not (arr.ndim == 3 and arr.shape[2] == 3):
        raise InputError(f"{name}: unexpected image shape {arr.shape}")
    if arr.size == 0:
        raise InputError(f"{name}: image has no pixels")
    chw = arr[np.newaxis] if arr.ndim == 2 else np.moveaxis(arr, -1, 0)
    unit = np.clip(chw / top, 0.0, 1.0)
    if top == 65535.0:
        display = np.rint(arr / 257.0).astype(np.uint8)  # 65535 / 257 = 255
    else:
        display = np.rint(arr).astype(np.uint8)
    return Scan(
        pixels=unit.astype(np.float32), display=display, file_sha256=file_sha256,
        pixel_sha256=pixel_digest(chw), width=int(chw.shape[2]), height=int(chw.shape[1]),
        channels=int(chw.shape[0]), spacing_mm=None, modality="RASTER", window=None, frame=frame,
        kind="raster", file_name=name, notes=tuple(notes), metadata={"format": fmt, "mode": img.mode},
    )
