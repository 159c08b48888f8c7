"""The Scan: what imaging hands to the rest of casefile (model-input picture, display picture, digests)."""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from typing import Any

import numpy as np


def pixel_digest(values: np.ndarray) -> str:
    """SHA-256 hex of decoded values in [C, H, W] layout.

    The hashed bytes are the ASCII prefix ``"float32le:" + "x".join(shape) + "\\n"`` followed by the
    array as float32, little-endian, C order. For DICOM the values are after the Modality LUT (before
    any window); for raster files they are the decoded sample values (after EXIF orientation, alpha
    dropped), before scaling to 0..1.
    """
    arr = np.ascontiguousarray(values, dtype="<f4")
    prefix = ("float32le:" + "x".join(str(n) for n in arr.shape) + "\n").encode("ascii")
    return hashlib.sha256(prefix + arr.tobytes(order="C")).hexdigest()


def _frozen(arr: np.ndarray) -> np.ndarray:
    out = np.ascontiguousarray(arr)
    out.flags.writeable = False
    return out


@dataclass(frozen=True, eq=False, repr=False)
class Scan:
    """One loaded input. Holds no direct identifiers; see ``casefile.imaging.identity``."""

    pixels: np.ndarray  # float32 [C, H, W] in 0..1
    display: np.ndarray  # uint8 [H, W] or [H, W, 3]
    file_sha256: str
    pixel_sha256: str
    width: int
    height: int
    channels: int
    spacing_mm: tuple[float, float] | None
    modality: str
    window: dict[str, Any] | None
    frame: int | None
    kind: str  # "dicom" or "raster"
    file_name: str
    notes: tuple[str, ...] = ()
    pseudonym: str | None = None
    study_uid: str | None = None
    series_uid: str | None = None
    sop_uid: str | None = None
    metadata: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        object.__setattr__(self, "pixels", _frozen(self.pixels.astype(np.float32, copy=False)))
        object.__setattr__(self, "display", _frozen(self.display.astype(np.uint8, copy=False)))

    def to_record(self) -> dict[str, Any]:
        """JSON-ready ``input`` part of a case body (without ``display_blob``, which the record adds)."""
        return {
            "file_name": self.file_name,
            "file_sha256": self.file_sha256,
            "pixel_sha256": self.pixel_sha256,
            "kind": self.kind,
            "modality": self.modality,
            "width": self.width,
            "height": self.height,
            "channels": self.channels,
            "spacing_mm": list(self.spacing_mm) if self.spacing_mm is not None else None,
            "window": dict(self.window) if self.window is not None else None,
            "frame": self.frame,
            "pseudonym": self.pseudonym,
            "study_uid": self.study_uid,
            "series_uid": self.series_uid,
            "sop_uid": self.sop_uid,
            "notes": list(self.notes),
        }

    def __repr__(self) -> str:
        return (
            f"Scan(file_name={self.file_name!r}, kind={self.kind!r}, modality={self.modality!r}, "
            f"size={self.width}x{self.height}x{self.channels}, frame={self.frame}, "
            f"file_sha256={self.file_sha256[:12]}…, pixel_sha256={self.pixel_sha256[:12]}…)"
        )
