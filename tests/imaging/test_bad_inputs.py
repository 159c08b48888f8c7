"""Corrupt and odd inputs give one-line InputErrors naming the file; fuzzed bytes never give anything else.

Outside sources: pydicom's bundled test files (open data; their README describes each), DICOM PS3.3
C.11.2.1.2.1 (window width at least 1), and hypothesis for the fuzzed bytes.
"""

from __future__ import annotations

import io
import shutil
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from PIL import Image

from casefile.errors import InputError
from casefile.imaging import load

from .synth import bundled, write_dicom


def one_line_error(path: Path, key: Path) -> str:
    """The InputError message for ``path``, checked to be one line that starts with the file's name."""
    with pytest.raises(InputError) as info:
        load(path, key=key)
    message = str(info.value)
    assert "\n" not in message
    assert message.startswith(f"{path.name}: "), message
    return message


# Decisions per pydicom test file (pydicom test_files/README.txt describes each):
#   MR_truncated.dcm  Pixel Data shorter than Rows x Columns x 2 bytes -> refused
#   badVR.dcm         Number of Frames is "1A" (not an IS) -> refused, cannot know the frame count
#   no_meta.dcm       starts with one stray byte before the data set; neither Part 10 nor a parseable
#                     bare data set -> "not a DICOM or raster image file"
#   rtplan.dcm        an RT Plan: valid DICOM without Pixel Data -> refused, naming that
@pytest.mark.parametrize(
    ("name", "pattern"),
    [
        ("MR_truncated.dcm", "Pixel Data is truncated (8130 of 8192 bytes)"),
        ("badVR.dcm", "invalid Number Of Frames value '1A'"),
        ("no_meta.dcm", "not a DICOM or raster image file"),
        ("rtplan.dcm", "DICOM file has no Pixel Data"),
        ("README.txt", "not a DICOM or raster image file"),
    ],
)
def test_pydicom_odd_files(name: str, pattern: str, tmp_path: Path, site_key: Path) -> None:
    copy = tmp_path / name
    shutil.copyfile(bundled(name), copy)
    assert pattern in one_line_error(copy, site_key)


def test_truncated_png(tmp_path: Path, site_key: Path) -> None:
    buf = io.BytesIO()
    Image.fromarray(np.random.default_rng(0).integers(0, 255, (48, 48), dtype=np.uint8)).save(buf, "PNG")
    cut = tmp_path / "cut.png"
    cut.write_bytes(buf.getvalue()[: len(buf.getvalue()) // 2])
    assert "PNG image cannot be decoded" in one_line_error(cut, site_key)


def test_missing_and_empty_files(tmp_path: Path, site_key: Path) -> None:
    assert "file not found" in one_line_error(tmp_path / "absent.dcm", site_key)
    empty = tmp_path / "empty.png"
    empty.write_bytes(b"")
    assert "file is empty" in one_line_error(empty, site_key)
    folder = tmp_path / "folder.dcm"
    folder.mkdir()
    assert "folder" in one_line_error(folder, site_key)


def test_bad_window_argument(tmp_path: Path, site_key: Path) -> None:
    path = write_dicom(tmp_path / "w.dcm", np.zeros((8, 8), dtype=np.uint16))
    with pytest.raises(InputError, match=r"^w\.dcm: window argument not usable"):
        load(path, key=site_key, window={"center": 0, "width": 0.5, "function": "LINEAR"})  # PS3.3: w >= 1
    with pytest.raises(InputError, match="window must be"):
        load(path, key=site_key, window="bright")


def test_unusable_file_window_falls_back_with_a_note(tmp_path: Path, site_key: Path) -> None:
    path = write_dicom(tmp_path / "w0.dcm", np.arange(64, dtype=np.uint16).reshape(8, 8),
                       WindowCenter=10, WindowWidth=0)  # width 0 breaks PS3.3 C.11.2.1.2.1
    scan = load(path, key=site_key)
    assert scan.window["source"] == "minmax"
    assert any("not usable" in n for n in scan.notes)


def _seed_files() -> list[bytes]:
    buf = io.BytesIO()
    Image.new("RGB", (8, 8), (10, 200, 30)).save(buf, "PNG")
    return [Path(bundled("MR_small.dcm")).read_bytes()[:1400], buf.getvalue()]


SEEDS = _seed_files()


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    raw=st.binary(max_size=600),
    seed=st.integers(0, len(SEEDS)),
    flips=st.lists(st.tuples(st.integers(0, 1399), st.integers(0, 255)), max_size=8),
)
def test_fuzz_never_raises_anything_but_input_error(
    raw: bytes, seed: int, flips: list[tuple[int, int]], tmp_path: Path, site_key: Path
) -> None:
    # random bytes, or a real DICOM/PNG head with bytes overwritten
    if seed < len(SEEDS):
        data = bytearray(SEEDS[seed])
        for pos, val in flips:
            data[pos % len(data)] = val
        data = bytes(data) + raw[:64]
    else:
        data = raw
    path = tmp_path / "fuzz.bin"
    path.write_bytes(data)
    try:
        load(path, key=site_key)
    except InputError as exc:
        assert "\n" not in str(exc) and str(exc).startswith("fuzz.bin: ")
