"""Size limits on an input, checked from what its header declares before any pixel is decoded.

A few kilobytes can declare an image of billions of pixels (a PNG of zeros compresses about a
thousandfold; an RLE or JPEG frame can be nearly empty), and decoders allocate what the header
declares. So every input is held to three limits before it is decoded:

* per frame: width x height (DICOM Columns x Rows) at most ``max_pixels``;
* per file: width x height x samples per pixel x frames at most ``max_file_pixels`` (all frames of a
  multi-frame file together; the count of stored sample values is what decoding memory grows with);
* the file's byte size at most ``max_file_bytes``: 8 bytes (the widest sample, 64-bit float) for each
  sample ``max_file_pixels`` allows, plus 64 MiB for everything that is not pixel data. A file above
  that cannot hold an image within the limits, so it is refused before it is read into memory. Memory
  for files within it grows with the file's size, not by a decoder's multiple of it.

The limits come from the site settings (casefile.site: ``max_pixels``, ``max_file_pixels``;
``$CASEFILE_MAX_PIXELS``, ``$CASEFILE_MAX_FILE_PIXELS``; defaults 100 and 400 megapixels), or are given
by the caller. While a file is loaded, Pillow's own guard (``PIL.Image.MAX_IMAGE_PIXELS``) is set to the
same per-frame limit, so a decoder that Pillow runs is held to it too.
"""

from __future__ import annotations

import re
import struct
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass

from PIL import Image

from casefile import site
from casefile.errors import InputError

NON_PIXEL_BYTES = 64 * 1024 * 1024
WIDEST_SAMPLE_BYTES = 8
# W3C PNG (ISO/IEC 15948) §5.2: the 8-byte signature; §11.2.2: IHDR is the first chunk, 13 data bytes,
# starting with Width and Height as 4-byte unsigned big-endian integers (so bytes 16..24 of the file).
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
_PILLOW_BOMB = re.compile(r"\((\d+) pixels\)")


@dataclass(frozen=True)
class Limits:
    """The limits one load is held to (see the module docstring)."""

    max_pixels: int = site.DEFAULT_MAX_PIXELS
    max_file_pixels: int = site.DEFAULT_MAX_FILE_PIXELS

    @property
    def max_file_bytes(self) -> int:
        return WIDEST_SAMPLE_BYTES * self.max_file_pixels + NON_PIXEL_BYTES


def resolve_limits(max_pixels: int | None = None, max_file_pixels: int | None = None) -> Limits:
    """The limits for a load: those given, the site settings for the rest (read only when needed)."""
    for label, value in (("max_pixels", max_pixels), ("max_file_pixels", max_file_pixels)):
        if value is not None and (isinstance(value, bool) or not isinstance(value, int) or value < 1):
            raise InputError(f"{label} must be a whole number of at least 1, got {value!r}")
    if max_pixels is None or max_file_pixels is None:
        settings = site.load_site_settings()
        max_pixels = settings.max_pixels if max_pixels is None else max_pixels
        max_file_pixels = settings.max_file_pixels if max_file_pixels is None else max_file_pixels
    return Limits(max_pixels=max_pixels, max_file_pixels=max(max_file_pixels, max_pixels))


def _amount(n: int, unit: str = "pixels") -> str:
    """"144.0 megapixels" / "480.0 million values"; below a million the exact count ("9999 pixels")."""
    if n < 1_000_000:
        return f"{n} {unit}"
    return f"{n / 1e6:.1f} {'megapixels' if unit == 'pixels' else 'million ' + unit}"


def check_frame(name: str, width: int, height: int, limits: Limits) -> None:
    """Refuse a frame whose declared width x height is not positive or is above ``max_pixels``."""
    if width < 1 or height < 1:
        raise InputError(f"{name}: image declares {width} x {height} pixels; width and height must be at least 1")
    n = width * height
    if n > limits.max_pixels:
        raise InputError(
            f"{name}: image declares {width} x {height} = {_amount(n)}, above the limit of "
            f"{_amount(limits.max_pixels)} per frame (set max_pixels in the site settings or "
            f"${site.MAX_PIXELS_ENV})")


def check_file(name: str, width: int, height: int, samples: int, frames: int, limits: Limits) -> None:
    """Refuse a file whose frames together declare more sample values than ``max_file_pixels``."""
    n = width * height * samples * frames
    if n > limits.max_file_pixels:
        raise InputError(
            f"{name}: file declares {frames} frame(s) of {width} x {height} x {samples} sample(s) = "
            f"{_amount(n, 'values')}, above the limit of {_amount(limits.max_file_pixels, 'values')} per file (set "
            f"max_file_pixels in the site settings or ${site.MAX_FILE_PIXELS_ENV})")


def check_file_bytes(name: str, size: int, limits: Limits) -> None:
    """Refuse, before reading it, a file too large to hold any image within the pixel limits."""
    if size > limits.max_file_bytes:
        raise InputError(
            f"{name}: file is {size / 1e6:.1f} MB, more than an image within the limits can take "
            f"({limits.max_file_bytes / 1e6:.1f} MB for {_amount(limits.max_file_pixels, 'values')} per file); "
            "not read")


def png_size(data: bytes) -> tuple[int, int] | None:
    """(width, height) from a PNG's IHDR chunk, or None when the bytes do not start like a PNG."""
    if not data.startswith(PNG_SIGNATURE) or len(data) < 24 or data[12:16] != b"IHDR":
        return None
    width, height = struct.unpack(">II", data[16:24])
    return int(width), int(height)


def check_png_header(data: bytes, name: str, limits: Limits) -> None:
    """A PNG's declared size, checked from IHDR before Pillow is asked to do anything with the file."""
    size = png_size(data)
    if size is not None:
        check_frame(name, size[0], size[1], limits)


@contextmanager
def pillow_held_to(limits: Limits) -> Iterator[None]:
    """Pillow warns above MAX_IMAGE_PIXELS and refuses above twice it: match it to the per-frame limit while
    a file is opened and decoded, then put back what was there (other rooms use Pillow too)."""
    previous = Image.MAX_IMAGE_PIXELS
    Image.MAX_IMAGE_PIXELS = limits.max_pixels
    try:
        yield
    finally:
        Image.MAX_IMAGE_PIXELS = previous


def pillow_refusal(name: str, exc: Exception, limits: Limits) -> InputError:
    """Our message for Pillow's DecompressionBombError (raised at open, for more than twice the limit)."""
    found = _PILLOW_BOMB.search(str(exc))
    declared = _amount(int(found.group(1))) if found else "more than twice the limit"
    return InputError(
        f"{name}: image declares {declared}, above the limit of {_amount(limits.max_pixels)} per "
        f"frame (set max_pixels in the site settings or ${site.MAX_PIXELS_ENV})")
