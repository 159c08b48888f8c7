"""Fonts for the case sheet: embedded DejaVu TrueType when present, and text made safe for them."""

from __future__ import annotations

import os
import unicodedata
import zlib
from dataclasses import dataclass
from functools import lru_cache

from reportlab.pdfbase import pdfmetrics
from reportlab.pdfbase.ttfonts import TTFont

# Debian/Ubuntu ship these in the package "fonts-dejavu-core" (common practice).
DEJAVU_DIR = "/usr/share/fonts/truetype/dejavu"
_FILES = {"regular": "DejaVuSans.ttf", "bold": "DejaVuSans-Bold.ttf", "mono": "DejaVuSansMono.ttf"}
_NAMES = {"regular": "CasefileSans", "bold": "CasefileSans-Bold", "mono": "CasefileMono"}
_FALLBACK = {"regular": "Helvetica", "bold": "Helvetica-Bold", "mono": "Courier"}


@dataclass(frozen=True)
class FontSet:
    """Font names to use on the canvas; ``embedded`` is False when the built-in PDF fonts stood in."""

    regular: str
    bold: str
    mono: str
    embedded: bool


@lru_cache(maxsize=4)
def font_set(font_dir: str = DEJAVU_DIR) -> FontSet:
    """Register DejaVu Sans (regular, bold, mono) from ``font_dir``; fall back to built-in fonts."""
    paths = {k: os.path.join(font_dir, f) for k, f in _FILES.items()}
    if not all(os.path.isfile(p) for p in paths.values()):
        return FontSet(embedded=False, **_FALLBACK)
    suffix = "" if font_dir == DEJAVU_DIR else f"-{zlib.crc32(font_dir.encode()):08x}"
    names = {k: v + suffix for k, v in _NAMES.items()}
    try:
        for key, path in paths.items():
            if names[key] not in pdfmetrics.getRegisteredFontNames():
                pdfmetrics.registerFont(TTFont(names[key], path))
    except Exception:  # a broken font file must not stop the sheet
        return FontSet(embedded=False, **_FALLBACK)
    return FontSet(embedded=True, **names)


@lru_cache(maxsize=8)
def _covered(font_name: str) -> frozenset[int] | None:
    font = pdfmetrics.getFont(font_name)
    face = getattr(font, "face", None)
    cmap = getattr(face, "charToGlyph", None)
    return frozenset(cmap) if cmap else None


def clean(text: object, font_name: str, *, keep_newlines: bool = False) -> str:
    """Text the font can show: control characters dropped, characters it lacks replaced by '?'."""
    s = "" if text is None else str(text)
    s = unicodedata.normalize("NFC", s)
    covered = _covered(font_name)
    out = []
    for ch in s:
        if ch == "\n" and keep_newlines:
            out.append(ch)
        elif ch in "\t\r\n":
            out.append(" ")
        elif unicodedata.category(ch) in ("Cc", "Cf", "Cs", "Co", "Cn"):
            continue
        elif covered is None:  # built-in font: Latin-1 only
            out.append(ch if ord(ch) < 256 else "?")
        else:
            out.append(ch if ord(ch) in covered else "?")
    return "".join(out)
