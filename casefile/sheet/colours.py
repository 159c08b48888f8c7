"""Our own colour map for influence maps, overlays on the displayed image, and deterministic PNG bytes.

The map is built in CIELAB: lightness rises linearly from 15 to 95 while the hue turns from deep blue
through teal and green to pale yellow. Chroma is moderate and, where sRGB cannot show it, lowered for
that entry only (hue and lightness kept), so lightness alone already orders the values. That is what
keeps the map readable in grey print and for readers with red-green colour vision deficiency.
"""

from __future__ import annotations

import io
from functools import lru_cache

import numpy as np
from PIL import Image

# CIE D65 reference white (2 degree observer), XYZ with Y = 1: CIE 15:2004, common practice.
_WHITE_D65 = (0.95047, 1.0, 1.08883)
# XYZ -> linear sRGB matrix: IEC 61966-2-1 (sRGB), common practice.
_XYZ_TO_RGB = np.array(
    [
        [3.2406, -1.5372, -0.4986],
        [-0.9689, 1.8758, 0.0415],
        [0.0557, -0.2040, 1.0570],
    ]
)

L_START, L_END = 15.0, 94.0
HUE_START, HUE_END = 285.0, 100.0  # CIELAB hue angle in degrees: blue -> teal -> green -> yellow
LEVELS = 256


def lab_to_srgb(lab: np.ndarray) -> np.ndarray:
    """CIELAB (D65) to sRGB in 0..1 (unclipped), by the CIE and IEC 61966-2-1 formulas."""
    lab = np.asarray(lab, dtype=np.float64)
    L, a, b = lab[..., 0], lab[..., 1], lab[..., 2]
    fy = (L + 16.0) / 116.0
    fx = fy + a / 500.0
    fz = fy - b / 200.0
    delta = 6.0 / 29.0

    def finv(t: np.ndarray) -> np.ndarray:
        return np.where(t > delta, t**3, 3.0 * delta**2 * (t - 4.0 / 29.0))

    xyz = np.stack([finv(fx) * _WHITE_D65[0], finv(fy) * _WHITE_D65[1], finv(fz) * _WHITE_D65[2]], -1)
    lin = xyz @ _XYZ_TO_RGB.T
    lin_c = np.clip(lin, 0.0, None)
    srgb = np.where(lin_c <= 0.0031308, 12.92 * lin_c, 1.055 * lin_c ** (1.0 / 2.4) - 0.055)
    return np.where(lin < 0, lin, srgb)  # keep negatives visible to the gamut test


def srgb_to_lab(rgb: np.ndarray) -> np.ndarray:
    """sRGB in 0..1 to CIELAB (D65): the inverse of :func:`lab_to_srgb` within the gamut."""
    c = np.asarray(rgb, dtype=np.float64)
    lin = np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
    xyz = lin @ np.linalg.inv(_XYZ_TO_RGB).T / np.array(_WHITE_D65)
    delta = 6.0 / 29.0
    f = np.where(xyz > delta**3, np.cbrt(xyz), xyz / (3 * delta**2) + 4.0 / 29.0)
    return np.stack([116 * f[..., 1] - 16, 500 * (f[..., 0] - f[..., 1]), 200 * (f[..., 1] - f[..., 2])], -1)


def _quantise(target_rgb: np.ndarray, target_lab: np.ndarray, min_l: float) -> tuple[np.ndarray, float]:
    """Of the uint8 colours within two steps of the target, the nearest whose lightness exceeds min_l.

    Lightness errors weigh three times as much as hue/chroma errors, so rounding never lets the
    lightness drift away from its straight line.
    """
    steps = np.array([[(k // 25) - 2, (k // 5) % 5 - 2, k % 5 - 2] for k in range(125)], dtype=np.float64)
    cand = np.clip(np.round(target_rgb * 255.0)[None, :] + steps, 0, 255)
    labs = srgb_to_lab(cand / 255.0)
    err = labs - target_lab[None, :]
    dist = np.linalg.norm(err, axis=1) + 3.0 * np.abs(err[:, 0])
    dist[labs[:, 0] <= min_l + 0.02] += 1e6  # margin: other sRGB matrices differ slightly
    k = int(np.argmin(dist))
    return cand[k], float(labs[k, 0])


def _in_gamut(rgb: np.ndarray) -> bool:
    return bool(np.all(rgb >= -1e-9) and np.all(rgb <= 1.0 + 1e-9))


def _chroma_wanted(t: float) -> float:
    """Moderate chroma: about 24 through deep blue and teal, rising smoothly to 50 at pale yellow."""
    return 24.0 + 26.0 * t**2


@lru_cache(maxsize=1)
def colour_lut() -> np.ndarray:
    """The 256-entry colour map as uint8 ``[256, 3]`` (entry 0 = least influence, 255 = most)."""
    out = np.zeros((LEVELS, 3), dtype=np.float64)
    prev_l = -1.0
    for i in range(LEVELS):
        t = i / (LEVELS - 1)
        L = L_START + (L_END - L_START) * t
        h = np.deg2rad(HUE_START + (HUE_END - HUE_START) * t)
        lo, hi = 0.0, _chroma_wanted(t)
        rgb = lab_to_srgb(np.array([L, hi * np.cos(h), hi * np.sin(h)]))
        if not _in_gamut(rgb):  # bisect on chroma: the largest in-gamut chroma at this L and hue
            for _ in range(30):
                mid = 0.5 * (lo + hi)
                if _in_gamut(lab_to_srgb(np.array([L, mid * np.cos(h), mid * np.sin(h)]))):
                    lo = mid
                else:
                    hi = mid
            rgb = lab_to_srgb(np.array([L, lo * np.cos(h), lo * np.sin(h)]))
        rgb = np.clip(rgb, 0.0, 1.0)
        out[i], prev_l = _quantise(rgb, srgb_to_lab(rgb), prev_l if i else -1.0)
    lut = out.astype(np.uint8)
    lut.setflags(write=False)
    return lut


def apply_map(values: np.ndarray) -> np.ndarray:
    """Colour values in 0..1 (clipped) with the map: ``[H, W]`` float -> ``[H, W, 3]`` uint8."""
    v = np.nan_to_num(np.asarray(values, dtype=np.float64), nan=0.0, posinf=1.0, neginf=0.0)
    idx = np.clip(np.round(v * (LEVELS - 1)), 0, LEVELS - 1).astype(np.intp)
    return colour_lut()[idx]


def scale_bar(width: int = 256, height: int = 14) -> np.ndarray:
    """A horizontal strip of the colour map, left = 0 (least influence), right = 1 (most)."""
    if width < 2 or height < 1:
        raise ValueError("scale bar needs width >= 2 and height >= 1")
    row = apply_map(np.linspace(0.0, 1.0, width))
    return np.repeat(row[None, :, :], height, axis=0)


DEFAULT_FONT = "/usr/share/fonts/truetype/dejavu/DejaVuSans.ttf"


def labelled_scale_bar(width: int = 300, bar_height: int = 14, font_path: str | None = DEFAULT_FONT) -> np.ndarray:
    """The scale strip with its words under it, as an RGB picture (for pages outside the PDF)."""
    from PIL import ImageDraw, ImageFont

    pad = 6
    canvas = Image.new("RGB", (width + 2 * pad, bar_height + 30), "white")
    canvas.paste(Image.fromarray(scale_bar(width, bar_height)), (pad, pad))
    draw = ImageDraw.Draw(canvas)
    try:
        font = ImageFont.truetype(font_path, 11) if font_path else ImageFont.load_default()
    except OSError:
        font = ImageFont.load_default()
    y = pad + bar_height + 3
    draw.text((pad, y), "0 least influence", fill="black", font=font)
    right = "1 most influence"
    w = draw.textlength(right, font=font)
    draw.text((pad + width - w, y), right, fill="black", font=font)
    return np.asarray(canvas)


def _as_rgb(display: np.ndarray) -> np.ndarray:
    d = np.asarray(display)
    if d.dtype != np.uint8:
        raise ValueError(f"display image must be uint8, got {d.dtype}")
    if d.ndim == 2:
        return np.repeat(d[:, :, None], 3, axis=2)
    if d.ndim == 3 and d.shape[2] == 3:
        return d
    if d.ndim == 3 and d.shape[2] == 1:
        return np.repeat(d, 3, axis=2)
    raise ValueError(f"display image must be [H, W] or [H, W, 3], got shape {d.shape}")


def normalise_map(map_float: np.ndarray, size: tuple[int, int]) -> np.ndarray:
    """Map scaled to 0..1 by its maximum (negatives to 0) and resized bilinearly to ``size`` = (h, w)."""
    m = np.nan_to_num(np.asarray(map_float, dtype=np.float32), nan=0.0, posinf=0.0, neginf=0.0)
    if m.ndim != 2 or m.size == 0:
        raise ValueError(f"map must be a non-empty [H, W] array, got shape {m.shape}")
    m = np.clip(m, 0.0, None)
    top = float(m.max())
    m = m / top if top > 0 else np.zeros_like(m)
    h, w = size
    if m.shape != (h, w):
        m = np.asarray(Image.fromarray(m, mode="F").resize((w, h), Image.Resampling.BILINEAR))
    return np.clip(m, 0.0, 1.0)


def contour_edges(values: np.ndarray, level: float) -> np.ndarray:
    """Pixels on the boundary of ``values >= level`` (inside pixels with a 4-neighbour outside)."""
    inside = values >= level
    pad = np.pad(inside, 1, mode="constant", constant_values=False)
    all_in = pad[:-2, 1:-1] & pad[2:, 1:-1] & pad[1:-1, :-2] & pad[1:-1, 2:]
    return inside & ~all_in


def _grow(mask: np.ndarray) -> np.ndarray:
    pad = np.pad(mask, 1, mode="constant", constant_values=False)
    return mask | pad[:-2, 1:-1] | pad[2:, 1:-1] | pad[1:-1, :-2] | pad[1:-1, 2:]


OVERLAY_RAMP = (0.15, 0.6)  # map values where an overlay starts to show and where it reaches full strength
CONTOUR_LEVELS = (0.5, 0.8)  # fractions of the map's maximum
CONTOUR_INK = (26.0, 28.0, 33.0)  # the sheet's ink colour (draw.INK) in 0..255
CONTOUR_HALO = (255.0, 255.0, 255.0)


def overlay(
    display_uint8: np.ndarray,
    map_float: np.ndarray,
    *,
    opacity: float = 0.9,
    ramp: tuple[float, float] | None = OVERLAY_RAMP,
    contours: tuple[float, ...] | None = CONTOUR_LEVELS,
) -> np.ndarray:
    """The coloured map over the displayed image, strong where the map is high, with contour lines.

    The map is normalised to 0..1 by its maximum and resized to the display size bilinearly. Its
    opacity follows the map value: none below ``ramp[0]``, rising linearly to ``opacity`` at
    ``ramp[1]`` and above, so low values leave the picture as it is and hot spots stand out in print
    (``ramp=None``: the same ``opacity`` everywhere). Each contour level is a dark line with a white
    edge outside it, so it shows on light and dark regions alike; the highest level is drawn twice as
    thick, so the two levels differ by shape as well.
    """
    if not 0.0 <= opacity <= 1.0:
        raise ValueError(f"opacity must be within 0..1, got {opacity}")
    if ramp is not None and not 0.0 <= ramp[0] < ramp[1] <= 1.0:
        raise ValueError(f"ramp must be two increasing values within 0..1, got {ramp}")
    base = _as_rgb(display_uint8).astype(np.float32)
    h, w = base.shape[:2]
    m = normalise_map(map_float, (h, w))
    colour = apply_map(m).astype(np.float32)
    if ramp is None:
        alpha = np.full((h, w, 1), opacity, dtype=np.float32)
    else:
        alpha = (opacity * np.clip((m - ramp[0]) / (ramp[1] - ramp[0]), 0.0, 1.0))[..., None]
    out = (1.0 - alpha) * base + alpha * colour
    if contours:
        levels = sorted(float(v) for v in contours)
        for level in levels:
            edge = contour_edges(m, level)
            if level == levels[-1] and len(levels) > 1:
                edge = _grow(edge) & (m >= level)  # two pixels wide, inside the level
            out[_grow(edge) & ~edge & (m < level)] = CONTOUR_HALO
            out[edge] = CONTOUR_INK
    return np.clip(np.round(out), 0, 255).astype(np.uint8)


def map_picture(map_float: np.ndarray, size: tuple[int, int]) -> np.ndarray:
    """The map alone in the colour map, normalised by its maximum, at ``size`` = (h, w): for maps
    whose fine speckle reads better without the picture under it (gradient saliency)."""
    return apply_map(normalise_map(map_float, size))


def png_bytes(rgb: np.ndarray) -> bytes:
    """PNG bytes of an uint8 picture: no text chunks, no time stamp, fixed compression (deterministic)."""
    a = np.ascontiguousarray(rgb)
    if a.dtype != np.uint8 or a.ndim not in (2, 3):
        raise ValueError(f"png_bytes needs an uint8 [H, W] or [H, W, 3] array, got {a.dtype} {a.shape}")
    buf = io.BytesIO()
    Image.fromarray(a).save(buf, format="PNG", compress_level=6, optimize=False)
    return buf.getvalue()
