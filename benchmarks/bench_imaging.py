"""Prints ratios for input loading: compressed vs plain decode, and our window vs pydicom's apply_voi_lut."""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

import numpy as np
import pydicom
from pydicom.data import get_testdata_file
from pydicom.pixels import apply_voi_lut

from casefile.imaging import apply_window, load


def best(fn, repeat: int = 20) -> float:
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return min(times)


def main() -> None:
    key = Path(tempfile.mkdtemp()) / "site.key"
    plain = get_testdata_file("MR_small.dcm", download=False)
    base = best(lambda: load(plain, key=key))
    for name in ("MR_small_RLE.dcm", "MR_small_jp2klossless.dcm", "MR_small_jpeg_ls_lossless.dcm"):
        path = get_testdata_file(name, download=False)
        print(f"load {name} / load MR_small.dcm: {best(lambda p=path: load(p, key=key)) / base:.2f}")
    ds = pydicom.dcmread(get_testdata_file("CT_small.dcm", download=False))
    ds.WindowCenter, ds.WindowWidth = 40, 400
    values = ds.pixel_array.astype(np.float64) - 1024
    ours = best(lambda: apply_window(values, 40, 400, "LINEAR"), 200)
    theirs = best(lambda: apply_voi_lut(values, ds), 200)
    print(f"apply_window LINEAR / pydicom apply_voi_lut (128x128): {ours / theirs:.2f}")


if __name__ == "__main__":
    main()
