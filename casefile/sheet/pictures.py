"""The pictures part of the case sheet: the image as displayed, each map overlay, and the colour scale."""

from __future__ import annotations

import hashlib
import io
from collections.abc import Callable
from typing import Any

import numpy as np
from PIL import Image
from reportlab.lib.utils import ImageReader
from reportlab.pdfbase.pdfmetrics import stringWidth
from reportlab.pdfgen.canvas import Canvas

from . import words
from .colours import CONTOUR_LEVELS, OVERLAY_RAMP, map_picture, overlay, scale_bar
from .draw import GREY, INK, ROI_INK, RULE, Block, text_line, wrap
from .fonts import FontSet, clean
from .region import Region, region

MAX_PIXELS = 384  # pictures larger than this (either side) are shrunk for the sheet
MIN_PIXELS = 256  # smaller pictures are enlarged (nearest pixel) so contour lines stay thin
METHOD_NAMES = {"gradcam": "Grad-CAM", "occlusion": "Occlusion sensitivity", "gradient": "Gradient saliency"}
NICE_MM = (1, 2, 5, 10, 20, 50, 100, 200, 500)
PER_ROW = 4
PANEL_GAP = 10.0  # points between picture panels
CAPTION_DROP = 10.0  # points from a picture's lower edge down to its title's baseline
ALONE = frozenset({"gradient"})  # maps whose fine speckle reads better beside the image than over it
LOW, HIGH = (words.number(v) for v in CONTOUR_LEVELS)
ROI_DASH = (3.0, 2.0)  # points on, points off


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


def _roi_line(c: Canvas, box: tuple[float, float, float, float], px: float, py: float, dw: float,
              dh: float) -> None:
    """The region of interest as a dashed line on a picture drawn at (px, py) with size dw x dh."""
    x0, y0, x1, y1 = box
    c.saveState()
    c.setStrokeColorRGB(*ROI_INK)
    c.setLineWidth(1.3)
    c.setDash(*ROI_DASH)
    c.rect(px + x0 * dw, py + (1 - y1) * dh, (x1 - x0) * dw, (y1 - y0) * dh, stroke=1, fill=0)
    c.restoreState()


def _panel(fonts: FontSet, pic: np.ndarray | None, why: str, title: str, lines: list[str], side: float,
           mm: float | None = None, roi: Region | None = None) -> tuple[float, Callable[[Canvas, float, float], None]]:
    size, leading = 6.8, 7.9
    wrapped = [ln for text in lines for ln in wrap(clean(text, fonts.regular), fonts.regular, size, side)]
    title_lines = wrap(clean(title, fonts.bold), fonts.bold, 7.8, side)
    h = side + 4 + 9 * len(title_lines) + leading * len(wrapped)

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
            if roi is not None and roi.box is not None:
                _roi_line(c, roi.box, px, py, dw, dh)
            if mm is not None:
                _mm_bar(c, fonts, px, py, dw, mm)
        yy = y - side - CAPTION_DROP
        for ln in title_lines:
            text_line(c, x, yy, ln, fonts.bold, 7.8)
            yy -= 9
        yy -= 0.5
        for ln in wrapped:
            text_line(c, x, yy, ln, fonts.regular, size, GREY)
            yy -= leading

    return h, draw


def _image_lines(inp: dict, disp: np.ndarray | None) -> tuple[list[str], float | None]:
    """Caption of the displayed image, and its field width in mm when the pixel spacing is known."""
    lines = [words.window(inp.get("window")),
             f"{words.kind(inp.get('kind'))}, {inp.get('width', '?')} × {inp.get('height', '?')} px"]
    spacing = inp.get("spacing_mm")
    mm = None
    if isinstance(spacing, list | tuple) and len(spacing) == 2 and all(
            isinstance(v, int | float) and not isinstance(v, bool) for v in spacing):
        lines.append(f"pixel spacing {words.number(spacing[0])} × {words.number(spacing[1])} mm (row × column), "
                     "as recorded")
        if disp is not None and spacing[1] > 0:
            mm = float(spacing[1]) * int(inp.get("width") or disp.shape[1])  # field width in mm
    else:
        lines.append("pixel spacing unknown: no mm scale")
    return lines, mm


def _map_panel(fonts: FontSet, m: dict, blob: Callable[[str], bytes], disp: np.ndarray | None, why: str,
               side: float, roi: Region) -> tuple[float, Callable[[Canvas, float, float], None]]:
    raw, mwhy = _raw_map(m, blob)
    method = str(m.get("method", "?"))
    alone = method in ALONE
    pic, pwhy = None, mwhy
    if raw is not None and alone:
        pic = map_picture(raw, disp.shape[:2]) if disp is not None else _sheet_size(map_picture(raw, raw.shape))
    elif raw is not None and disp is not None:
        pic = overlay(disp, raw)
    elif raw is not None:
        pwhy = why
    params = m.get("params") if isinstance(m.get("params"), dict) else {}
    title = METHOD_NAMES.get(method, words.key_words(method))
    if params.get("exact") is False:
        title += ", approximate"
    shape = " × ".join(str(v) for v in m.get("shape") or []) or "of unknown size"
    info = [*words.params(method, params),
            f"raw map {shape}" + ("; shown alone: its fine speckle reads better without the picture under it"
                                  if alone else "")]
    return _panel(fonts, pic, pwhy, title, info, side, roi=roi)


def panel_side(width: float) -> float:
    """The side of each square picture panel on a text column ``width`` points wide."""
    return (width - PANEL_GAP * (PER_ROW - 1)) / PER_ROW


def picture_blocks(case: dict, blob: Callable[[str], bytes], fonts: FontSet, width: float) -> list[Block]:
    """Heading, rows of picture panels (display first, then one per map), the colour scale and legend."""
    inp = case.get("input") or {}
    disp, why = _display(case, blob)
    roi = region(case)
    lines, mm = _image_lines(inp, disp)
    gap, side = PANEL_GAP, panel_side(width)
    disp = None if disp is None else _sheet_size(disp)
    panels = [_panel(fonts, disp, why, "Image as displayed", lines, side, mm, roi=roi)]
    panels += [_map_panel(fonts, m, blob, disp, why, side, roi) for m in case.get("maps") or []
               if isinstance(m, dict)]
    blocks = [Block(16, lambda c, x, y: text_line(c, x, y - 11, "Pictures", fonts.bold, 10.5), keep_with_next=True)]
    for start in range(0, len(panels), PER_ROW):
        row = panels[start:start + PER_ROW]
        rh = max(p[0] for p in row) + 3

        def draw_row(c: Canvas, x: float, y: float, row: list = row) -> None:
            for k, (_, d) in enumerate(row):
                d(c, x + k * (side + gap), y)

        blocks.append(Block(rh, draw_row))
    blocks.append(_legend_block(fonts, width, roi))
    return blocks


def _legend_block(fonts: FontSet, width: float, roi: Region) -> Block:
    """The labelled colour scale; under it, what the contour lines and the dashed region line mean."""
    size, leading = 6.8, 7.9
    bar_x, bar_w = 122.0, min(230.0, width * 0.44)
    note_x = bar_x + bar_w + 12
    scale_note = wrap(clean("each map scaled by its own maximum; values are relative, not probabilities; "
                            f"below {words.number(OVERLAY_RAMP[0])} the picture shows through", fonts.regular),
                      fonts.regular, size, width - note_x)
    contour_words = f"contour lines: thin at {LOW}, thick at {HIGH} of the map's maximum"
    sample_x = 20 + stringWidth(contour_words, fonts.regular, size) + 14
    roi_x = sample_x + 20
    roi_lines = wrap(clean(roi.words, fonts.regular), fonts.regular, size, width - roi_x - 20)
    row1 = max(26.0, 4 + leading * len(scale_note))
    strip = ImageReader(Image.fromarray(scale_bar(256, 8)))

    def draw(c: Canvas, x: float, y: float) -> None:
        text_line(c, x, y - 10, "Colour scale of the maps", fonts.bold, 7.5)
        c.drawImage(strip, x + bar_x, y - 13, bar_w, 9)
        c.setStrokeColorRGB(*RULE)
        c.setLineWidth(0.5)
        c.rect(x + bar_x, y - 13, bar_w, 9, stroke=1, fill=0)
        text_line(c, x + bar_x, y - 22, "0  least influence", fonts.regular, size, INK)
        c.setFont(fonts.regular, size)
        c.drawRightString(x + bar_x + bar_w, y - 22, "most influence  1")
        c.drawCentredString(x + bar_x + bar_w / 2, y - 22, "0.5")
        for i, ln in enumerate(scale_note):
            text_line(c, x + note_x, y - 8 - leading * i, ln, fonts.regular, size, GREY)
        y2 = y - row1 - 6
        c.saveState()  # samples drawn as overlay() and _roi_line() draw them
        c.setStrokeColorRGB(*INK)
        c.setLineWidth(0.6)
        c.line(x, y2 + 4.5, x + 14, y2 + 4.5)
        c.setLineWidth(1.4)
        c.line(x, y2 + 0.5, x + 14, y2 + 0.5)
        c.restoreState()
        if roi.box is not None:  # the dashed sample only where the pictures carry the line
            c.saveState()
            c.setStrokeColorRGB(*ROI_INK)
            c.setLineWidth(1.3)
            c.setDash(*ROI_DASH)
            c.line(x + sample_x, y2 + 2.5, x + sample_x + 14, y2 + 2.5)
            c.restoreState()
        text_line(c, x + 20, y2, contour_words, fonts.regular, size, INK)
        for i, ln in enumerate(roi_lines):
            text_line(c, x + roi_x, y2 - leading * i, ln, fonts.regular, size, INK)

    return Block(row1 + 6 + leading * max(1, len(roi_lines)) + 4, draw)
