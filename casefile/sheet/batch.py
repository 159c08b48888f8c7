"""Writes many case sheets to a folder, one at a time, so memory stays flat however long the batch."""

from __future__ import annotations

import os
import re
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import Any

from ..errors import InputError
from ..files import write_atomic
from .layout import render_sheet

_SAFE = re.compile(r"[^A-Za-z0-9._-]+")


def sheet_file_name(case_id: str) -> str:
    """A file name for the sheet of ``case_id`` that is safe on every file system."""
    name = _SAFE.sub("_", str(case_id)).strip("._") or "case"
    return f"{name[:120]}.pdf"


def render_many(
    items: Iterable[dict[str, Any]],
    folder: str | os.PathLike[str],
    *,
    page_size: str = "A4",
    fixed_time: Any = None,
    on_done: Callable[[str, Path], None] | None = None,
) -> list[Path]:
    """Render each item (a dict of ``render_sheet`` arguments: case, blob, reviews, as_of_seq,
    entry_hash) to ``folder/<case id>.pdf``. Items are consumed lazily, written atomically (a
    casefile.files.write_atomic) and not kept; returns the paths written."""
    out = Path(folder)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise InputError(f"{out}: cannot create the sheet folder ({e.strerror})") from e
    written: list[Path] = []
    for item in items:
        args = dict(item)
        case = args.pop("case")
        args.setdefault("page_size", page_size)
        args.setdefault("fixed_time", fixed_time)
        pdf = render_sheet(case, **args)
        path = write_atomic(out / sheet_file_name(case.get("case_id", "case")), pdf)
        del pdf
        written.append(path)
        if on_done is not None:
            on_done(str(case.get("case_id")), path)
    return written
