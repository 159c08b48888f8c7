"""A model file that is a zip bomb is refused before torch opens it; the files torch writes pass.

Outside sources: the ZIP file format (PKWARE APPNOTE.TXT, section 4.4: each member's central directory
record declares its compressed and uncompressed sizes) as read by Python's zipfile, a reference
library; torch's own writers (torch.save, torch.jit.save, torch.export.save) for what genuine model
files look like.
"""

from __future__ import annotations

import zipfile

import pytest
import torch

from casefile.errors import ModelError
from casefile.models import load_model
from casefile.models.archive import MAX_EXPANSION
from tests.models.conftest import TRUSTED


def _bomb(path, inflated: int) -> None:
    """A zip laid out like torch.save's, whose one deflated member inflates to ``inflated`` zero bytes."""
    with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_DEFLATED) as z:
        z.writestr("tiny/version", "3\n")
        with z.open("tiny/data/0", "w", force_zip64=True) as f:
            block = bytes(1 << 20)
            for _ in range(inflated >> 20):
                f.write(block)


def test_a_zip_bomb_is_refused_before_torch_reads_it(tiny, tmp_path, monkeypatch):
    bomb = tmp_path / "bomb.pt"
    _bomb(bomb, 64 << 20)
    assert bomb.stat().st_size < 1 << 20  # 64 MiB of zeros in under one

    def never(*_a, **_k):
        raise AssertionError("torch opened the file")

    monkeypatch.setattr(torch, "load", never)
    monkeypatch.setattr(torch.jit, "load", never)
    with pytest.raises(ModelError) as info:
        load_model(bomb, tiny["card"], trusted_entry_points=TRUSTED)
    said = str(info.value)
    assert said.startswith("bomb.pt: its members inflate to 67,108,866 bytes") and "zip bomb" in said
    assert "\n" not in said


@pytest.mark.parametrize("form", ["weights", "ts", "pt2"])
def test_the_files_torch_writes_declare_about_their_own_size(tiny, form):
    path = tiny[form]
    with zipfile.ZipFile(path) as z:
        declared = sum(i.file_size for i in z.infolist())
    # weights stored, TorchScript's code deflated: at most twice the file, far below the refusal line
    assert declared <= 2 * path.stat().st_size < MAX_EXPANSION * path.stat().st_size
    assert load_model(path, tiny["card"], trusted_entry_points=TRUSTED).digest
