"""Grey-level transforms of DICOM PS3.3 in plain numpy: Modality LUT, VOI window functions and LUTs.

Every function here returns float64 arrays; the window functions return values in 0..1 (our choice of
output range: ``ymin = 0``, ``ymax = 1`` in the formulas of PS3.3 C.11.2.1.2 / C.11.2.1.3). The caller
scales to 0..255 for display.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

WINDOW_FUNCTIONS = ("LINEAR", "LINEAR_EXACT", "SIGMOID")


def rescale(stored: np.ndarray, slope: float = 1.0, intercept: float = 0.0) -> np.ndarray:
    """Modality LUT by Rescale Slope/Intercept (PS3.3 C.11.1.1.2): ``slope * stored + intercept``."""
    return np.asarray(stored, dtype=np.float64) * float(slope) + float(intercept)


def lut_lookup(values: np.ndarray, descriptor: Sequence[int], data: Sequence[int] | np.ndarray) -> np.ndarray:
    """Apply a LUT given by its descriptor ``(entries, first_mapped, bits)`` (PS3.3 C.11.1.1.1 / C.11.2.1.1).

    Values below the first mapped value take the first entry, values past the last entry take the last
    entry. An entry count of 0 means 65536 (PS3.3 C.11.1.1.1).
    """
    entries, first = int(descriptor[0]), int(descriptor[1])
    if entries == 0:
        entries = 65536
    table = np.asarray(data, dtype=np.float64).ravel()[:entries]
    if table.size == 0:
        raise ValueError("LUT has no data")
    index = np.clip(np.rint(np.asarray(values, dtype=np.float64)) - first, 0, table.size - 1)
    return table[index.astype(np.int64)]


def window_linear(x: np.ndarray, center: float, width: float) -> np.ndarray:
    """LINEAR window of PS3.3 C.11.2.1.2.1, output 0..1; width must be >= 1.

    x <= c - 0.5 - (w - 1) / 2  -> 0;  x > c - 0.5 + (w - 1) / 2 -> 1;
    else ((x - (c - 0.5)) / (w - 1) + 0.5). With w == 1 both bounds meet at c - 0.5 and the window is
    a threshold: the division by w - 1 is never evaluated.
    """
    c, w = float(center), float(width)
    if not w >= 1:
        raise ValueError(f"window width {w:g} is below 1, the minimum for LINEAR (PS3.3 C.11.2.1.2.1)")
    x = np.asarray(x, dtype=np.float64)
    low = c - 0.5 - (w - 1) / 2
    high = c - 0.5 + (w - 1) / 2
    if w == 1:
        return np.where(x > high, 1.0, 0.0)
    y = (x - (c - 0.5)) / (w - 1) + 0.5
    return np.where(x <= low, 0.0, np.where(x > high, 1.0, y))


def window_linear_exact(x: np.ndarray, center: float, width: float) -> np.ndarray:
    """LINEAR_EXACT window of PS3.3 C.11.2.1.3.2, output 0..1; width must be > 0.

    x <= c - w/2 -> 0;  x > c + w/2 -> 1;  else (x - c) / w + 0.5.
    """
    c, w = float(center), float(width)
    if not w > 0:
        raise ValueError(f"window width {w:g} must be above 0 for LINEAR_EXACT (PS3.3 C.11.2.1.3.2)")
    x = np.asarray(x, dtype=np.float64)
    y = (x - c) / w + 0.5
    return np.where(x <= c - w / 2, 0.0, np.where(x > c + w / 2, 1.0, y))


def window_sigmoid(x: np.ndarray, center: float, width: float) -> np.ndarray:
    """SIGMOID window of PS3.3 C.11.2.1.3.1, output 0..1: ``1 / (1 + exp(-4 (x - c) / w))``; width > 0."""
    c, w = float(center), float(width)
    if not w > 0:
        raise ValueError(f"window width {w:g} must be above 0 for SIGMOID (PS3.3 C.11.2.1.3.1)")
    z = -4.0 * (np.asarray(x, dtype=np.float64) - c) / w
    # exp overflows to inf far below the centre; 1 / (1 + inf) is the correct limit 0.
    with np.errstate(over="ignore"):
        return 1.0 / (1.0 + np.exp(z))


def apply_window(x: np.ndarray, center: float, width: float, function: str = "LINEAR") -> np.ndarray:
    """Dispatch to the window function named as in the VOI LUT Function attribute (0028,1056)."""
    name = function.strip().upper()
    if name == "LINEAR":
        return window_linear(x, center, width)
    if name == "LINEAR_EXACT":
        return window_linear_exact(x, center, width)
    if name == "SIGMOID":
        return window_sigmoid(x, center, width)
    raise ValueError(f"unknown VOI LUT Function {function!r}; expected one of {', '.join(WINDOW_FUNCTIONS)}")


def minmax_window(x: np.ndarray) -> tuple[float, float]:
    """Centre and width that map the data's own range onto 0..1 with LINEAR_EXACT (width 0 if constant)."""
    x = np.asarray(x, dtype=np.float64)
    low, high = float(np.min(x)), float(np.max(x))
    return (low + high) / 2, high - low


def to_display(unit: np.ndarray) -> np.ndarray:
    """Values in 0..1 to uint8 0..255 by rounding half to even (numpy rint)."""
    return np.rint(np.clip(unit, 0.0, 1.0) * 255.0).astype(np.uint8)
