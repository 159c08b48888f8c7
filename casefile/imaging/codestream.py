"""The size a compressed DICOM frame declares inside itself (JPEG, JPEG-LS, JPEG 2000), read without decoding.

A JPEG-family decoder sizes its output from the codestream's own header, not from the data set's Rows
and Columns, so a frame can declare far more than the data set says. These readers find that header:

* JPEG (ITU-T T.81 Annex B.2.2) and JPEG-LS (ITU-T T.87, C.2.2): the frame header SOFn (or SOF55 for
  JPEG-LS) holds Lf (16 bits), P (8), Y = lines (16), X = samples per line (16), Nf = components (8);
  markers before it are skipped by their 16-bit lengths (B.1.1.4), fill bytes 0xFF may precede a marker;
* JPEG 2000 (ITU-T T.800 Annex A.5.1): the SIZ segment follows the SOC marker and holds Lsiz (16),
  Rsiz (16), Xsiz, Ysiz, XOsiz, YOsiz, XTsiz, YTsiz, XTOsiz, YTOsiz (32 each), Csiz (16); the image is
  (Xsiz - XOsiz) x (Ysiz - YOsiz). A JP2 file wrapper (T.800 Annex I) is looked through for the
  codestream. High-Throughput JPEG 2000 (T.814) uses the same codestream header.
"""

from __future__ import annotations

import struct

# T.81 Table B.1: SOF0-3, SOF5-7, SOF9-11, SOF13-15; T.87 Table C.1: SOF55 (0xF7) for JPEG-LS
SOF_MARKERS = frozenset([*range(0xC0, 0xC4), *range(0xC5, 0xC8), *range(0xC9, 0xCC), *range(0xCD, 0xD0), 0xF7])
_NO_LENGTH = frozenset([0x01, *range(0xD0, 0xD8)])  # TEM and RST0-7 stand alone (T.81 B.1.1.3)
_J2K_START = b"\xff\x4f\xff\x51"  # SOC then SIZ
_JP2_SIGNATURE = b"\x00\x00\x00\x0cjP  \r\n\x87\n"


def jpeg_size(data: bytes) -> tuple[int, int, int] | None:
    """(columns, rows, components) from a JPEG or JPEG-LS frame header; None if none comes before the scan."""
    if data[:2] != b"\xff\xd8":  # SOI
        return None
    i = 2
    while i + 4 <= len(data):
        if data[i] != 0xFF:
            return None
        marker = data[i + 1]
        if marker == 0xFF:  # a fill byte
            i += 1
            continue
        if marker in _NO_LENGTH:
            i += 2
            continue
        if marker in (0xD9, 0xDA):  # EOI or SOS before any frame header
            return None
        (length,) = struct.unpack(">H", data[i + 2:i + 4])
        if length < 2:
            return None
        if marker in SOF_MARKERS:
            if i + 10 > len(data):
                return None
            rows, columns, components = struct.unpack(">HHB", data[i + 5:i + 10])
            return columns, rows, components
        i += 2 + length
    return None


def j2k_size(data: bytes) -> tuple[int, int, int] | None:
    """(columns, rows, components) from a JPEG 2000 codestream's SIZ segment (or a JP2 file's codestream)."""
    start = 0
    if data.startswith(_JP2_SIGNATURE):
        start = data.find(_J2K_START)
        if start < 0:
            return None
    elif not data.startswith(_J2K_START):
        return None
    siz = data[start + 4:start + 4 + 38]
    if len(siz) < 38:
        return None
    xsiz, ysiz, xosiz, yosiz = struct.unpack(">IIII", siz[4:20])
    (csiz,) = struct.unpack(">H", siz[36:38])
    return xsiz - xosiz, ysiz - yosiz, csiz
