"""The pictures part of the case sheet: the image as displayed, each map overlay, and the colour scale."""

from __future__ import annotations

import hashlib
import io
from collections.abc import Callable
from typing import Any

import numpy as np
from PIL import Image
from reportlab.lib.utils import ImageReader
from reportlab.pdfgen.canvas import Canvas

from .colours import overlay, scale_bar
from .draw import GREY, INK, RULE, Block, text_line, wrap
from .fonts import FontSet, clean

MAX_PIXELS = 384  # pictures larger than this (either side) are shrunk for the sheet
MIN_PIXELS = 256  # smaller pictures are enlarged (nearest pixel) so contour lines stay thin
METHOD_NAMES = {"gradcam": "Grad-CAM", "occlusion": "Occlusion sensitivity", "gradient": "Gradient saliency"}
NICE_MM = (1, 2, 5, 10, 20, 50, 100, 200, 500)
PER_ROW = 4


def _fetch(blob: Callable[[str], bytes], digest: Any) -> tuple[bytes | None, str]:
    """Blob bytes when present and matching their digest; else None and the reason, for the sheet."""
    if not digest:
        return None, "not recorded"
    try:
        data = blob(str(digest))
    except Exception:  # the sheet still prints; the gap is shown in words
        return None, "blob missing from the ledger"
    if hashlib.sha256(data).hexdigest() != str(digest):
        return None, "blob does not match its recorded digest"
    return data, ""


def _display(case: dict, blob: Callable[[str], bytes]) -> tuple[np.ndarray | None, str]:
    data, why = _fetch(blob, (case.get("input") or {}).get("display_blob"))
    if data is None:
        return None, why
    try:
        img = Image.open(io.BytesIO(data))
        img = img if img.mode in ("L", "RGB") else img.convert("RGB")
        return np.asarray(img), ""
    except Exception:
        return None, "display picture cannot be read"


def _raw_map(m: dict, blob: Callable[[str], bytes]) -> tuple[np.ndarray | None, str]:
    data, why = _fetch(blob, m.get("raw_blob"))
    if data is None:
        return None, why
    shape = tuple(int(v) for v in m.get("shape") or ())
    if len(shape) != 2 or shape[0] * shape[1] * 4 != len(data):
        return None, f"raw map size does not match its shape {list(shape)}"
    return np.frombuffer(data, dtype="<f4").reshape(shape), ""


def _sheet_size(a: np.ndarray) -> np.ndarray:
    """Shrink big pictures (Lanczos); enlarge small ones by a whole factor, each pixel kept square."""
    h, w = a.shape[:2]
    if max(h, w) > MAX_PIXELS:
        k = MAX_PIXELS / max(h, w)
        img = Image.fromarray(a).resize((max(1, round(w * k)), max(1, round(h * k))), Image.Resampling.LANCZOS)
        return np.asarray(img)
    k = MIN_PIXELS // max(h, w)
    if k >= 2:
        return np.repeat(np.repeat(a, k, axis=0), k, axis=1)
    return a


def _params_text(params: Any) -> str:
    if not isinstance(params, dict) or not params:
        return "no parameters recorded"
    return ", ".join(f"{k} {v}" for k, v in params.items())


def _mm_bar(c: Canvas, fonts: FontSet, x: float, y: float, dw: float, field_mm: float) -> None:
    """A scale bar in millimetres drawn inside the lower left of the picture ``field_mm`` wide."""
    target = field_mm * 0.3
    length = min(NICE_MM, key=lambda v: abs(v - target))
    bar = dw * length / field_mm
    if bar < 6 or bar > dw - 8:
        return
    c.saveState()
    c.setFillColorRGB(1, 1, 1)
    c.setStrokeColorRGB(0, 0, 0)
    c.setLineWidth(0.6)
    c.rect(x + 4, y + 4, bar, 3, stroke=1, fill=1)
    label = f"{length} mm"
    c.setFont(fonts.bold, 6.5)
    lw = c.stringWidth(label, fonts.bold, 6.5)
    c.setFillColorRGB(0, 0, 0)
    c.rect(x + 3, y + 9, lw + 3, 8, stroke=0, fill=1)
    c.setFillColorRGB(1, 1, 1)
    c.drawString(x + 4.5, y + 11, label)
    c.restoreState()


def _panel(fonts: FontSet, pic: np.ndarray | None, why: str, title: str, lines: list[str], side: float,
           mm: float | None = None) -> tuple[float, Callable[[Canvas, float, float], None]]:
    size, leading = 6.8, 7.9
    wrapped = [ln for text in lines for ln in wrap(clean(text, fonts.regular), fonts.regular, size, side)]
    h = side + 13 + leading * len(wrapped)

    def draw(c: Canvas, x: float, y: float) -> None:
        c.setFillColorRGB(0, 0, 0)
        c.rect(x, y - side, side, side, stroke=0, fill=1)
        if pic is None:
            c.setFillColorRGB(1, 1, 1)
            c.setFont(fonts.regular, 7)
            c.drawCentredString(x + side / 2, y - side / 2 + 4, "picture not available:")
            c.drawCentredString(x + side / 2, y - side / 2 - 6, clean(why, fonts.regular)[:40])
        else:
            ph, pw = pic.shape[:2]
            k = side / max(ph, pw)
            dw, dh = pw * k, ph * k
            px, py = x + (side - dw) / 2, y - side + (side - dh) / 2
            c.drawImage(ImageReader(Image.fromarray(pic)), px, py, dw, dh)
            if mm is not None:
                _mm_bar(c, fonts, px, py, dw, mm)
        text_line(c, x, y - side - 10, title, fonts.bold, 7.8)
        yy = y - side - 10 - leading - 1
        for ln in wrapped:
            text_line(c, x, yy, ln, fonts.regular, size, GREY)
            yy -= leading

    return h, draw


def picture_blocks(case: dict, blob: Callable[[str], bytes], fonts: FontSet, width: float) -> list[Block]:
    """Heading, rows of picture panels (display first, then one overlay per map), and the colour scale."""
    inp = case.get("input") or {}
    disp, why = _display(case, blob)
    window = inp.get("window")
    win = ("window " + ", ".join(f"{k} {v}" for k, v in window.items())) if isinstance(window, dict) and window \
        else "no window (shown as stored)"
    spacing = inp.get("spacing_mm")
    mm = None
    lines = [win, f"{inp.get('width', '?')}×{inp.get('height', '?')} px"]
    if isinstance(spacing, list | tuple) and len(spacing) == 2 and all(isinstance(v, int | float) for v in spacing):
        lines.append(f"pixel spacing {spacing[0]} × {spacing[1]} mm (row × column), as recorded")
        if disp is not None and spacing[1] > 0:
            mm = float(spacing[1]) * int(inp.get("width") or disp.shape[1])  # field width in mm
    else:
        lines.append("pixel spacing unknown: no mm scale")
    gap = 10.0
    side = (width - gap * (PER_ROW - 1)) / PER_ROW
    disp = None if disp is None else _sheet_size(disp)
    panels = [_panel(fonts, disp, why, "Image as displayed", lines, side, mm)]
    for m in case.get("maps") or []:
        raw, mwhy = _raw_map(m, blob)
        pic, pwhy = None, mwhy
        if raw is not None and disp is not None:
            pic = overlay(disp, raw)
        elif raw is not None:
            pwhy = why
        method = str(m.get("method", "?"))
        name = METHOD_NAMES.get(method, method)
        info = [_params_text(m.get("params")),
                f"raw map {'×'.join(str(v) for v in m.get('shape') or [])}; contours at 0.5 and 0.8 of its maximum"]
        panels.append(_panel(fonts, pic, pwhy, name, info, side))
    blocks = [Block(16, lambda c, x, y: text_line(c, x, y - 11, "Pictures", fonts.bold, 10.5), keep_with_next=True)]
    for start in range(0, len(panels), PER_ROW):
        row = panels[start:start + PER_ROW]
        rh = max(p[0] for p in row) + 3

        def draw_row(c: Canvas, x: float, y: float, row: list = row) -> None:
            for k, (_, d) in enumerate(row):
                d(c, x + k * (side + gap), y)

        blocks.append(Block(rh, draw_row))
    blocks.append(_scale_block(fonts, width))
    return blocks


def _scale_block(fonts: FontSet, width: float) -> Block:
    bar_w = min(260.0, width * 0.5)
    strip = ImageReader(Image.fromarray(scale_bar(256, 8)))

    def draw(c: Canvas, x: float, y: float) -> None:
        text_line(c, x, y - 10, "Colour scale of the overlays", fonts.bold, 7.5)
        bx = x + 122
        c.drawImage(strip, bx, y - 13, bar_w, 9)
        c.setStrokeColorRGB(*RULE)
        c.setLineWidth(0.5)
        c.rect(bx, y - 13, bar_w, 9, stroke=1, fill=0)
        text_line(c, bx, y - 22, "0  least influence", fonts.regular, 6.8, INK)
        c.setFont(fonts.regular, 6.8)
        c.drawRightString(bx + bar_w, y - 22, "most influence  1")
        c.drawCentredString(bx + bar_w / 2, y - 22, "0.5")
        text_line(c, bx + bar_w + 10, y - 10, "each map scaled by its own maximum;", fonts.regular, 6.8, GREY)
        text_line(c, bx + bar_w + 10, y - 19, "values are relative, not probabilities", fonts.regular, 6.8, GREY)

    return Block(27, draw)
