"""Size limits are checked from the header before any pixel is decoded, for every transfer syntax.

Sources: W3C PNG (ISO/IEC 15948) §11.2.2 (IHDR); DICOM PS3.3 C.7.6.3 (Image Pixel module: Rows, Columns,
Samples per Pixel), PS3.3 C.7.6.6 (Number of Frames), PS3.5 Annex A (transfer syntaxes), A.5 (deflated),
Annex G (RLE); ITU-T T.81 B.2.2 and T.87 C.2.2 (JPEG and JPEG-LS frame headers); ITU-T T.800 A.5.1
(JPEG 2000 SIZ). Reference files: pydicom's bundled test files (written by dcmtk, GDCM and others).
"""

from __future__ import annotations

import io
import json
import os
import shutil
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pydicom
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from PIL import Image
from pydicom.encaps import encapsulate, get_frame
from pydicom.uid import JPEGBaseline8Bit, RLELossless

from casefile.errors import InputError
from casefile.imaging import load
from casefile.imaging.codestream import j2k_size, jpeg_size
from casefile.imaging.limits import png_size

from .hostile import deflated_dicom, encapsulated_dicom, jpeg_frame, native_dicom, rle_frame, zero_png
from .synth import bundled, write_dicom

ROOT = Path(__file__).resolve().parents[2]
PEAK_LIMIT_MB = 500  # issue 16: refused with peak memory under 500 MB


@pytest.fixture(autouse=True)
def _own_site_settings(monkeypatch, tmp_path):
    """Defaults unless a test says otherwise: nothing on this machine sets the limits."""
    for name in ("CASEFILE_MAX_PIXELS", "CASEFILE_MAX_FILE_PIXELS"):
        monkeypatch.delenv(name, raising=False)
    monkeypatch.setenv("CASEFILE_CONFIG_DIR", str(tmp_path / "site-config"))


@pytest.fixture(scope="module")
def hostile(tmp_path_factory) -> dict[str, Path]:
    """Each file is a few kilobytes and declares (or inflates to) far more than the default limits."""
    d = tmp_path_factory.mktemp("hostile")
    return {
        "png": zero_png(d / "zeros.png", 12000, 12000),                               # ~140 KB
        "rle": encapsulated_dicom(d / "rle.dcm", RLELossless, rle_frame(), 60000, 60000),  # < 1 KB
        "native": native_dicom(d / "native.dcm", 60000, 60000, b"\x00" * 16),
        "jpeg": encapsulated_dicom(d / "jpeg.dcm", JPEGBaseline8Bit, jpeg_frame(64, 64), 60000, 60000),
        "jpeg_inside": encapsulated_dicom(d / "jpeg_inside.dcm", JPEGBaseline8Bit,
                                          jpeg_frame(64, 64, declared=(30000, 30000)), 64, 64),
        "deflated": deflated_dicom(d / "deflated.dcm", 60000, 60000),
        "deflate_bomb": deflated_dicom(d / "deflate_bomb.dcm", 64, 64, padding=1 << 30),  # 1 GiB inflated
    }


EXPECTED = {
    "png": "zeros.png: image declares 12000 x 12000 = 144.0 megapixels, above the limit of 100.0 megapixels "
           "per frame (set max_pixels in the site settings or $CASEFILE_MAX_PIXELS)",
    "rle": "rle.dcm: image declares 60000 x 60000 = 3600.0 megapixels, above the limit of 100.0 megapixels",
    "native": "native.dcm: image declares 60000 x 60000 = 3600.0 megapixels",
    "jpeg": "jpeg.dcm: image declares 60000 x 60000 = 3600.0 megapixels",
    "jpeg_inside": "jpeg_inside.dcm: frame 0: its JPEG Baseline (Process 1) data declares 30000 x 30000 with 1 "
                   "component(s), but the data set declares 64 x 64 with 1",
    "deflated": "deflated.dcm: image declares 60000 x 60000 = 3600.0 megapixels",
    "deflate_bomb": "deflate_bomb.dcm: deflated data set inflates to more than",
}

# The loader runs as the child of a small wrapper, so that RUSAGE_CHILDREN in the wrapper holds exactly
# the loader's peak resident memory (Linux getrusage(2): ru_maxrss in kilobytes).
_LOADER = textwrap.dedent("""
    import json, sys
    from casefile.errors import InputError
    from casefile.imaging import load
    out = {}
    for path in sys.argv[1:]:
        try:
            load(path, key=sys.argv[1] + ".site.key")
            out[path] = "loaded"
        except InputError as exc:
            out[path] = str(exc)
    out["torch imported"] = "torch" in sys.modules
    print(json.dumps(out))
""")
_WRAPPER = textwrap.dedent("""
    import resource, subprocess, sys
    done = subprocess.run([sys.executable, "-c", sys.argv[1], *sys.argv[2:]], capture_output=True, text=True,
                          timeout=600)
    sys.stderr.write(done.stderr)
    print(done.stdout.strip())
    print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)
""")


def test_hostile_files_are_refused_from_their_headers_in_little_memory(hostile, tmp_path):
    paths = [str(p) for p in hostile.values()]
    env = {**os.environ, "PYTHONPATH": str(ROOT), "CASEFILE_CONFIG_DIR": str(tmp_path / "site-config")}
    done = subprocess.run([sys.executable, "-c", _WRAPPER, _LOADER, *paths], capture_output=True, text=True,
                          env=env, timeout=900)  # a hang guard only; nothing here is timed
    assert done.returncode == 0, done.stderr
    result_line, peak_kb = done.stdout.strip().splitlines()[-2:]
    result = json.loads(result_line)
    assert result.pop("torch imported") is False  # the imaging room works without torch
    for key, path in hostile.items():
        message = result[str(path)]
        assert message.startswith(EXPECTED[key]), message
        assert "\n" not in message
    assert int(peak_kb) / 1024 < PEAK_LIMIT_MB, f"peak {int(peak_kb) / 1024:.0f} MB"


def test_png_ihdr_reader_agrees_with_pillow(tmp_path):
    buf = io.BytesIO()
    Image.new("L", (37, 23)).save(buf, "PNG")  # Pillow as the reference writer
    assert png_size(buf.getvalue()) == (37, 23)
    assert png_size(b"GIF89a" + bytes(30)) is None


CODESTREAM_FILES = [  # pydicom test files: (name, reader)
    ("SC_rgb_jpeg_dcmtk.dcm", jpeg_size), ("JPGExtended.dcm", jpeg_size), ("SC_rgb_jpeg_gdcm.dcm", jpeg_size),
    ("MR_small_jpeg_ls_lossless.dcm", jpeg_size), ("MR_small_jp2klossless.dcm", j2k_size),
    ("JPEG2000.dcm", j2k_size),
]


@pytest.mark.parametrize(("name", "reader"), CODESTREAM_FILES)
def test_codestream_readers_agree_with_reference_files(name, reader):
    ds = pydicom.dcmread(bundled(name))
    frame = get_frame(ds.PixelData, 0, number_of_frames=int(ds.get("NumberOfFrames", 1) or 1))
    assert reader(frame) == (ds.Columns, ds.Rows, ds.SamplesPerPixel)


@settings(max_examples=200, deadline=None)
@given(st.binary(max_size=80), st.sampled_from([b"\xff\xd8", b"\xff\x4f\xff\x51", b"\x89PNG\r\n\x1a\n", b""]))
def test_header_readers_never_raise(raw, start):
    data = start + raw
    for reader in (jpeg_size, j2k_size, png_size):
        out = reader(data)
        assert out is None or (isinstance(out, tuple) and all(isinstance(v, int) for v in out))


@pytest.mark.parametrize("name", ["MR_small_jpeg_ls_lossless.dcm", "MR_small_jp2klossless.dcm"])
def test_frame_declaring_another_size_than_the_data_set_is_refused(name, tmp_path, site_key):
    ds = pydicom.dcmread(bundled(name))
    ds.Rows = ds.Columns = 32  # the codestream still says 64 x 64
    path = tmp_path / name
    ds.save_as(path)
    with pytest.raises(InputError, match=r"data declares 64 x 64 with 1 component\(s\), but the data set "
                                         r"declares 32 x 32 with 1"):
        load(path, key=site_key)


def _png(path: Path, width: int, height: int) -> Path:
    Image.fromarray(np.full((height, width), 90, np.uint8)).save(path)
    return path


def test_limits_are_settable_from_each_source(tmp_path, site_key, monkeypatch):
    picture = _png(tmp_path / "p.png", 100, 100)  # 10,000 pixels
    assert load(picture, key=site_key, max_pixels=10_000).width == 100
    with pytest.raises(InputError, match=r"^p\.png: image declares 100 x 100 = 10000 pixels, above the limit of "
                                         r"5000 pixels per frame"):
        load(picture, key=site_key, max_pixels=5_000)
    monkeypatch.setenv("CASEFILE_MAX_PIXELS", "5000")
    with pytest.raises(InputError, match="above the limit of 5000 pixels"):
        load(picture, key=site_key)
    monkeypatch.delenv("CASEFILE_MAX_PIXELS")
    site = tmp_path / "site-config"
    site.mkdir()
    (site / "site.json").write_text(json.dumps({"max_pixels": 9_999}))
    with pytest.raises(InputError, match="above the limit of 9999 pixels"):
        load(picture, key=site_key)


def test_file_limit_counts_every_frame_and_sample(tmp_path, site_key):
    path = write_dicom(tmp_path / "mf.dcm", np.zeros((4, 50, 50), np.uint16))  # 4 frames of 50 x 50, 1 sample
    assert load(path, key=site_key, frame=1, max_pixels=2_500, max_file_pixels=10_000).height == 50
    with pytest.raises(InputError, match=r"^mf\.dcm: file declares 4 frame\(s\) of 50 x 50 x 1 sample\(s\) = "
                                         r"10000 values, above the limit of 9999 values per file"):
        load(path, key=site_key, frame=1, max_pixels=2_500, max_file_pixels=9_999)


def _gif(path: Path, side: int) -> Path:
    buf = io.BytesIO()
    Image.new("L", (8, 8)).save(buf, "GIF")
    data = bytearray(buf.getvalue())
    data[6:10] = side.to_bytes(2, "little") * 2  # GIF89a logical screen width and height (bytes 6..9)
    path.write_bytes(bytes(data))
    return path


def test_pillow_refusal_at_open_gets_our_message(tmp_path, site_key):
    wide = _gif(tmp_path / "wide.gif", 20000)
    with pytest.raises(InputError, match=r"^wide\.gif: image declares 400\.0 megapixels, above the limit of "
                                         r"100\.0 megapixels per frame"):
        load(wide, key=site_key)
    # Pillow's guard follows our limit: it refuses at open above twice max_pixels (Pillow documentation,
    # Image.open: DecompressionBombError), which its default (about 89.5 MP) would not do for 300 x 300
    before = Image.MAX_IMAGE_PIXELS
    small = _gif(tmp_path / "small.gif", 300)
    with pytest.raises(InputError, match=r"^small\.gif: image declares 90000 pixels, above the limit of 40000"):
        load(small, key=site_key, max_pixels=40_000)
    assert Image.MAX_IMAGE_PIXELS == before  # and is put back for the rest of the program


def test_file_too_large_for_any_image_is_not_read(tmp_path, site_key):
    big = tmp_path / "big.png"
    with big.open("wb") as f:  # sparse: no disk or memory used
        f.truncate(70 * 1024 * 1024)
    # limits of 1 pixel allow 8 bytes of pixels plus 64 MiB for the rest
    with pytest.raises(InputError, match=r"^big\.png: file is 73\.4 MB, more than an image within the limits "
                                         r"can take \(67\.1 MB for 1 values per file\); not read"):
        load(big, key=site_key, max_pixels=1, max_file_pixels=1)


@pytest.mark.parametrize(("attrs", "expected"), [
    ({"Rows": 0}, "image declares 8 x 0 pixels; width and height must be at least 1"),
    ({"SamplesPerPixel": 4}, "Samples per Pixel is 4; casefile reads 1"),
    ({"BitsAllocated": 12}, "Bits Allocated is 12; DICOM allows 1 or a multiple of 8 up to 64"),
])
def test_impossible_image_attributes_are_refused(attrs, expected, tmp_path, site_key):
    path = write_dicom(tmp_path / "odd.dcm", np.zeros((8, 8), np.uint16), **attrs)
    with pytest.raises(InputError, match=expected):
        load(path, key=site_key)


@pytest.mark.parametrize(("tsuid", "expected"), [
    ("1.2.3.4.5", "unknown or unsupported transfer syntax UID 1.2.3.4.5"),
    ("1.2.840.10008.1.2.4.100", "unsupported transfer syntax 1.2.840.10008.1.2.4.100 (MPEG2 Main Profile / "
                                "Main Level); casefile decodes native"),
])
def test_transfer_syntax_messages_say_what_is_wrong(tsuid, expected, tmp_path, site_key):
    ds = pydicom.dcmread(write_dicom(tmp_path / "plain.dcm", np.zeros((8, 8), np.uint16)))
    ds.file_meta.TransferSyntaxUID = tsuid
    ds.PixelData = encapsulate([bytes(8)])  # as a compressed syntax would carry it
    path = tmp_path / "ts.dcm"
    ds.save_as(path, enforce_file_format=True)
    with pytest.raises(InputError) as err:
        load(path, key=site_key)
    assert str(err.value).startswith(f"ts.dcm: {expected}")


def test_deflated_file_reads_as_its_plain_twin(tmp_path, site_key):
    # pydicom's image_dfl.dcm is Deflated Explicit VR Little Endian (PS3.5 A.5); its twin is re-saved plain
    source = tmp_path / "image_dfl.dcm"
    shutil.copyfile(bundled("image_dfl.dcm"), source)
    ds = pydicom.dcmread(source)
    ds.file_meta.TransferSyntaxUID = pydicom.uid.ExplicitVRLittleEndian
    twin = tmp_path / "plain.dcm"
    ds.save_as(twin)
    deflated, plain = load(source, key=site_key), load(twin, key=site_key)
    assert deflated.pixel_sha256 == plain.pixel_sha256
    assert np.array_equal(deflated.display, plain.display)
    assert deflated.metadata["TransferSyntaxUID"] == "1.2.840.10008.1.2.1.99"
