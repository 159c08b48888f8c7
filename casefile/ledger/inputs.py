"""Reading the small files that cross the trust boundary (key files, seal files): size-capped, one-line refusals."""

from __future__ import annotations

import os
from pathlib import Path

from casefile.errors import LedgerError


def read_small_file(path: str | os.PathLike[str], what: str, limit: int, *, hint: str = "") -> bytes:
    """The bytes of ``path``, refused in one line naming it when it is missing, a folder, unreadable or
    larger than ``limit`` bytes (read no further than that). ``hint`` follows "not found"."""
    p = Path(path)
    try:
        if p.is_dir():
            raise LedgerError(f"{p}: is a folder, not a {what}")
        size = p.stat().st_size
        if size > limit:
            raise LedgerError(f"{p}: {size} bytes is too large for a {what} (at most {limit} bytes)")
        return p.read_bytes()
    except FileNotFoundError:
        raise LedgerError(f"{p}: {what} not found{hint}") from None
    except OSError as exc:
        raise LedgerError(f"{p}: {what} cannot be read ({exc.strerror or exc})") from None
