"""Writing files whole (a reader sees the old file or the new one, never half of either), and a file's
SHA-256 read in pieces (never the whole file in memory)."""

from __future__ import annotations

import hashlib
import os
import tempfile
from pathlib import Path

from casefile.errors import OutputError


def _default_mode() -> int:
    """The mode a new file gets from the process umask (what ``open(path, "w")`` would give)."""
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def write_atomic(path: str | os.PathLike[str], data: bytes, *, mode: int | None = None) -> Path:
    """Write ``data`` to ``path`` through a temporary file in the same folder, flushed to disk and then
    renamed into place (``os.replace`` is atomic on POSIX and Windows).

    ``mode``: the new file's permission bits; by default an existing file keeps its own, and a new one
    gets what the umask allows. The folder must exist. Any failure leaves ``path`` as it was and
    raises OutputError naming the file.
    """
    target = Path(path)
    if mode is None:
        try:
            mode = target.stat().st_mode & 0o7777
        except OSError:
            mode = _default_mode()
    tmp: str | None = None
    try:
        fd, tmp = tempfile.mkstemp(dir=target.parent, prefix=f".{target.name}.", suffix=".part")
        with os.fdopen(fd, "wb") as f:
            f.write(data)
            f.flush()
            os.fsync(f.fileno())
        os.chmod(tmp, mode)
        os.replace(tmp, target)
        tmp = None
    except OSError as exc:
        raise OutputError(f"{target}: cannot be written ({exc.strerror or exc})") from None
    finally:
        if tmp is not None and os.path.exists(tmp):
            os.unlink(tmp)
    return target


def sha256_file(path: str | os.PathLike[str]) -> str:
    """The SHA-256 of a file's bytes, as 64 hex digits, read 1 MiB at a time. OSError propagates."""
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()
