"""Files written whole (casefile.files.write_atomic) and the software-versions dict of every record.

Outside sources: POSIX rename(2) replaces the target atomically (common practice for "write a
temporary file, then rename"); torch's own ``torch.get_num_threads`` for the thread count.
"""

from __future__ import annotations

import os
import stat

import pytest

from casefile.errors import OutputError
from casefile.files import write_atomic
from casefile.software import software_versions


def test_write_atomic_replaces_whole_and_leaves_no_temporary_file(tmp_path):
    target = tmp_path / "sheet.pdf"
    target.write_bytes(b"old")
    os.chmod(target, 0o640)
    write_atomic(target, b"new contents")
    assert target.read_bytes() == b"new contents"
    assert stat.S_IMODE(target.stat().st_mode) == 0o640  # an existing file keeps its mode
    assert [p.name for p in tmp_path.iterdir()] == ["sheet.pdf"]


def test_write_atomic_new_file_follows_the_umask(tmp_path):
    old = os.umask(0o027)
    try:
        write_atomic(tmp_path / "a.json", b"{}")
    finally:
        os.umask(old)
    assert stat.S_IMODE((tmp_path / "a.json").stat().st_mode) == 0o640  # 0666 & ~0027


def test_write_atomic_failure_is_one_line_and_keeps_the_old_file(tmp_path):
    with pytest.raises(OutputError, match="missing"):
        write_atomic(tmp_path / "missing" / "x.pdf", b"data")
    # the target is a folder full of files: the rename fails whoever runs the test (root included)
    target = tmp_path / "taken.pdf"
    target.mkdir()
    (target / "inside").write_bytes(b"kept")
    with pytest.raises(OutputError) as info:
        write_atomic(target, b"new")
    assert "\n" not in str(info.value) and "taken.pdf" in str(info.value)
    assert (target / "inside").read_bytes() == b"kept"
    assert not [p for p in tmp_path.iterdir() if p.name not in ("taken.pdf",)]  # no temporary file left


def test_software_versions_name_the_thread_count():
    import torch

    v = software_versions({"extra": 1})
    assert v["torch_threads"] == str(torch.get_num_threads()) and v["torch"] == torch.__version__
    assert {"casefile", "python", "numpy", "scipy"} <= set(v) and v["extra"] == "1"
    assert all(isinstance(x, str) for x in v.values())  # schemas/case.schema.json: software values are strings
