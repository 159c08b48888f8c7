"""Turns a scan's 0..1 pixels into the model's input tensor exactly as its card says, and the card's ROI."""

from __future__ import annotations

from typing import Any

import numpy as np
import torch
import torch.nn.functional as F

from casefile.errors import InputError

# ITU-R BT.601 luma weights (Rec. ITU-R BT.601-7, section 2.5.1: E'Y = 0.299 E'R + 0.587 E'G + 0.114 E'B)
BT601_LUMA = (0.299, 0.587, 0.114)


def _as_pixels(scan: Any) -> tuple[np.ndarray, str]:
    """Accept a Scan-like object with .pixels ([C, H, W] float 0..1) or the array itself."""
    pixels = getattr(scan, "pixels", scan)
    name = getattr(scan, "file_name", None) or "input"
    if isinstance(pixels, torch.Tensor):
        pixels = pixels.detach().cpu().numpy()
    arr = np.asarray(pixels)
    if arr.ndim != 3 or arr.shape[0] not in (1, 3):
        raise InputError(f"{name}: pixels must be [C, H, W] with C 1 or 3, got shape {tuple(arr.shape)}")
    if not np.issubdtype(arr.dtype, np.floating):
        raise InputError(f"{name}: pixels must be floating point in 0..1, got {arr.dtype}")
    if not np.all(np.isfinite(arr)):
        raise InputError(f"{name}: pixels contain NaN or infinite values")
    return arr.astype(np.float32, copy=False), name


def channel_step(have: int, want: int) -> str:
    if have == want:
        return "none"
    return "grey-to-colour: repeat" if want == 3 else "colour-to-grey: ITU-R BT.601 luma"


def preprocess_pixels(scan: Any, card: dict[str, Any]) -> tuple[torch.Tensor, dict[str, Any]]:
    """Return (Tensor[1, C, H, W] float32, record of the steps applied to this scan)."""
    arr, _ = _as_pixels(scan)
    spec = card["input"]
    want_c, want_h, want_w = spec["channels"], spec["height"], spec["width"]
    have_c, have_h, have_w = arr.shape
    x = torch.from_numpy(np.array(arr, dtype=np.float32, copy=True)).unsqueeze(0)  # scans are read-only
    if have_c == 1 and want_c == 3:
        x = x.repeat(1, 3, 1, 1)
    elif have_c == 3 and want_c == 1:
        w = torch.tensor(BT601_LUMA, dtype=torch.float32).view(1, 3, 1, 1)
        x = (x * w).sum(dim=1, keepdim=True)
    mode = card.get("resize", "bilinear")
    resized = (have_h, have_w) != (want_h, want_w)
    if resized and mode == "none":
        name = getattr(scan, "file_name", None) or "input"
        raise InputError(f"{name}: image is {have_w}x{have_h} px but the model card expects {want_w}x{want_h} "
                         "and allows no resizing")
    if resized:
        x = F.interpolate(x, size=(want_h, want_w), mode=mode, align_corners=False, antialias=True)
    mean = torch.tensor(card["normalisation"]["mean"], dtype=torch.float32).view(1, want_c, 1, 1)
    std = torch.tensor(card["normalisation"]["std"], dtype=torch.float32).view(1, want_c, 1, 1)
    x = ((x - mean) / std).to(torch.float32).contiguous()
    record = {
        "source_shape": [have_c, have_h, have_w],
        "channels": channel_step(have_c, want_c),
        "resize": f"from {have_h}x{have_w}" if resized else "none",
    }
    return x, record


def rules_record(card: dict[str, Any]) -> dict[str, Any]:
    """Everything needed to repeat the preprocessing of any scan for this card."""
    spec = card["input"]
    return {
        "input": {"channels": spec["channels"], "height": spec["height"], "width": spec["width"]},
        "windowing": card["windowing"],
        "channel_rule": {"grey_to_colour": "repeat", "colour_to_grey": "ITU-R BT.601 luma",
                         "luma_weights": list(BT601_LUMA)},
        "resize": {"function": "torch.nn.functional.interpolate", "mode": card.get("resize", "bilinear"),
                   "align_corners": False, "antialias": True, "when": "size differs"},
        "normalisation": {"mean": list(card["normalisation"]["mean"]),
                          "std": list(card["normalisation"]["std"]),
                          "formula": "(x - mean) / std"},
        "dtype": "float32",
        "torch": torch.__version__.split("+")[0],
    }


def roi_mask(card: dict[str, Any], h: int, w: int) -> np.ndarray | None:
    """The card's region of interest as bool [h, w] (True inside); None for the 'whole' rule.

    Pixel counts in the card are at model-input size; a different h, w scales them proportionally.
    'whole' gives None because a region-focus check against the whole picture says nothing.
    """
    roi = card["roi"]
    if roi["rule"] == "whole":
        return None
    sy = h / card["input"]["height"]
    sx = w / card["input"]["width"]
    mask = np.zeros((h, w), dtype=bool)
    if roi["rule"] == "border":
        by, bx = round(roi["pixels"] * sy), round(roi["pixels"] * sx)
        mask[by : h - by, bx : w - bx] = True
    else:
        mask[round(roi["y0"] * sy) : round(roi["y1"] * sy), round(roi["x0"] * sx) : round(roi["x1"] * sx)] = True
    return mask
