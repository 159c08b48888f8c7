"""Synthetic radiographs of cast aluminium parts with casting defects, deterministic from a seed.

A picture is 64x64 grey, 12-bit (0..4095, uint16): a bright casting on a darker background, thicker
metal brighter (positive display, DICOM MONOCHROME2), film-like grain and mottle. Defects remove metal
and so show darker: porosity (clusters of small round voids), shrinkage (spongy branching patches) and
cracks (thin jagged lines). A "burned-in marker" is a 5x5 letter-like glyph in the top-left corner,
inside the 8-pixel border that the demo cards exclude from the region of interest.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.ndimage import gaussian_filter

LABELS: tuple[str, ...] = ("sound", "porosity", "shrinkage", "crack")
SIZE = 64
MAX_VALUE = 4095  # 12 bits stored
BORDER = 8  # the corner marker lies inside this border; the demo cards' ROI excludes it
MARKER_AT = (1, 1)  # top-left pixel (row, col) of the glyph

# One 5x5 glyph per label, our own letter-like shapes ("S", "P", "H", "C").
_GLYPHS = {
    "sound": ["#####", "#....", "#####", "....#", "#####"],
    "porosity": ["####.", "#..#.", "####.", "#....", "#...."],
    "shrinkage": ["#...#", "#...#", "#####", "#...#", "#...#"],
    "crack": ["#####", "#....", "#....", "#....", "#####"],
}
GLYPHS = {k: np.array([[c == "#" for c in row] for row in v]) for k, v in _GLYPHS.items()}


def _label_name(label: int | str) -> str:
    if isinstance(label, str):
        if label not in LABELS:
            raise ValueError(f"unknown label {label!r}; known: {', '.join(LABELS)}")
        return label
    return LABELS[int(label)]


def _grid() -> tuple[np.ndarray, np.ndarray]:
    return np.mgrid[0:SIZE, 0:SIZE].astype(np.float64)


def _casting(rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Return (picture without defects, mask of metal) as float arrays."""
    yy, xx = _grid()
    cy, cx = 32 + rng.uniform(-3, 3, size=2)
    a, b = rng.uniform(20, 27, size=2)
    t = rng.uniform(0, np.pi)
    u = ((xx - cx) * np.cos(t) + (yy - cy) * np.sin(t)) / a
    v = (-(xx - cx) * np.sin(t) + (yy - cy) * np.cos(t)) / b
    r = np.sqrt(u * u + v * v)
    mask = np.clip((1.0 - r) * 12.0, 0.0, 1.0)  # soft edge about 2 px wide
    level = rng.uniform(0.55, 0.68)
    thickness = 0.06 * np.clip(1.0 - r * r, 0.0, 1.0)  # thicker towards the middle
    ramp = rng.uniform(-0.03, 0.03) * (xx - 32) / 32 + rng.uniform(-0.03, 0.03) * (yy - 32) / 32
    metal = level + thickness + ramp
    if rng.random() < 0.5:  # a rib across the part
        s = rng.uniform(0, np.pi)
        d = np.abs((xx - cx) * np.sin(s) - (yy - cy) * np.cos(s))
        metal = metal + 0.05 * np.clip(3.0 - d, 0.0, 1.0)
    background = rng.uniform(0.10, 0.18)
    return background + (metal - background) * mask, mask


def _site(rng: np.random.Generator, mask: np.ndarray) -> tuple[float, float]:
    """A defect centre well inside the metal and well inside the region of interest."""
    for _ in range(100):
        y, x = rng.uniform(16, 48, size=2)
        if mask[int(y), int(x)] >= 1.0:
            return float(y), float(x)
    return 32.0, 32.0


def _stamp(out: np.ndarray, y: float, x: float, radius: float, depth: float) -> None:
    yy, xx = _grid()
    out += depth * np.exp(-((yy - y) ** 2 + (xx - x) ** 2) / (2.0 * radius * radius))


def _porosity(rng: np.random.Generator, mask: np.ndarray) -> np.ndarray:
    dark = np.zeros((SIZE, SIZE))
    cy, cx = _site(rng, mask)
    for _ in range(int(rng.integers(4, 10))):
        _stamp(dark, cy + rng.normal(0, 3.5), cx + rng.normal(0, 3.5), rng.uniform(0.9, 1.6), rng.uniform(0.28, 0.4))
    return dark


def _shrinkage(rng: np.random.Generator, mask: np.ndarray) -> np.ndarray:
    dark = np.zeros((SIZE, SIZE))
    cy, cx = _site(rng, mask)
    for _ in range(int(rng.integers(3, 6))):
        y, x, heading = cy, cx, rng.uniform(0, 2 * np.pi)
        for _ in range(int(rng.integers(6, 12))):
            heading += rng.normal(0, 0.8)
            y, x = y + np.sin(heading) * 1.2, x + np.cos(heading) * 1.2
            _stamp(dark, y, x, rng.uniform(1.0, 2.0), 0.06)
    sponge = 0.55 + 0.45 * rng.random((SIZE, SIZE))  # spongy: uneven, pitted darkening
    return np.minimum(dark, 0.3) * sponge


def _crack(rng: np.random.Generator, mask: np.ndarray) -> np.ndarray:
    dark = np.zeros((SIZE, SIZE))
    cy, cx = _site(rng, mask)
    heading = rng.uniform(0, 2 * np.pi)
    length = rng.uniform(20, 30)
    y, x = cy - np.sin(heading) * length / 2, cx - np.cos(heading) * length / 2
    depth = rng.uniform(0.25, 0.35)
    bend = 0.0
    for step in range(int(length * 2)):
        if step % 3 == 0:
            bend = rng.normal(0, 0.7)  # jagged: short straight runs at changing angles
        y, x = y + np.sin(heading + bend) * 0.5, x + np.cos(heading + bend) * 0.5
        _stamp(dark, y, x, 0.45, depth * 0.5)
    return np.minimum(dark, depth)


_DEFECTS = {"porosity": _porosity, "shrinkage": _shrinkage, "crack": _crack}


def draw_marker(img: np.ndarray, glyph_label: int | str) -> np.ndarray:
    """Burn the glyph of `glyph_label` into the top-left corner (bright, noise-free), in place."""
    g = GLYPHS[_label_name(glyph_label)]
    r0, c0 = MARKER_AT
    block = img[r0 : r0 + g.shape[0], c0 : c0 + g.shape[1]]
    block[g] = MAX_VALUE if img.dtype == np.uint16 else 0.97
    return img


def make_case(
    rng: np.random.Generator, label: int | str, *, marker: bool | int | str = False, strength: float = 1.0
) -> np.ndarray:
    """One 64x64 12-bit radiograph (uint16, 0..4095) of a part with the given defect label.

    marker: False (none), True (the glyph of `label`) or a label (that label's glyph).
    strength scales the defect's darkening (1.0 normal; the shortcut training set uses a faint 0.25).
    """
    name = _label_name(label)
    img, mask = _casting(rng)
    if name in _DEFECTS:
        img = img - strength * _DEFECTS[name](rng, mask) * mask
    img = gaussian_filter(img, 0.6)  # geometric unsharpness
    mottle = gaussian_filter(rng.normal(0, 1, (SIZE, SIZE)), 3.0)
    img = img + 0.02 * mottle / (mottle.std() + 1e-12) + rng.normal(0, 0.018, (SIZE, SIZE))
    out = np.round(np.clip(img, 0.0, 1.0) * MAX_VALUE).astype(np.uint16)
    if marker is not False:
        draw_marker(out, name if marker is True else marker)
    return out


@dataclass(frozen=True)
class CaseSet:
    """Pictures with their ground truth: label index per picture, the glyph drawn (label name) or None."""

    images: np.ndarray  # uint16 [n, 64, 64]
    labels: np.ndarray  # int64 [n]
    markers: tuple[str | None, ...]

    def as_float(self) -> np.ndarray:
        """float32 [n, 1, 64, 64] in 0..1, what a model sees (full-range window)."""
        return (self.images.astype(np.float32) / MAX_VALUE)[:, None]


def make_set(
    seed: int, n: int, *, shortcut: bool = False, marker: str | None = None, strength: float | None = None
) -> CaseSet:
    """n pictures, labels balanced and shuffled, deterministic from seed.

    shortcut=False: full-strength defects; on about half the pictures a glyph of a random label,
    unrelated to the truth (so a model cannot learn the marker). shortcut=True: every picture carries
    its own label's glyph and the defect is faint (strength 0.25), so a model learns the marker.
    marker overrides the rule: "label", "random", "wrong" (another label's glyph) or "none".
    """
    rng = np.random.default_rng(seed)
    marker = marker or ("label" if shortcut else "random")
    if marker not in ("label", "random", "wrong", "none"):
        raise ValueError(f"unknown marker rule {marker!r}")
    strength = (0.25 if shortcut else 1.0) if strength is None else strength
    labels = rng.permutation(np.arange(n) % len(LABELS))
    images, drawn = [], []
    for lab in labels:
        glyph: str | None = None
        if marker == "label":
            glyph = LABELS[lab]
        elif marker == "random" and rng.random() < 0.5:
            glyph = LABELS[int(rng.integers(len(LABELS)))]
        elif marker == "wrong":
            glyph = LABELS[(lab + int(rng.integers(1, len(LABELS)))) % len(LABELS)]
        images.append(make_case(rng, int(lab), marker=glyph if glyph else False, strength=strength))
        drawn.append(glyph)
    return CaseSet(np.stack(images), labels.astype(np.int64), tuple(drawn))
