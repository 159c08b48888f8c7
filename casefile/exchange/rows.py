"""Audit rows (plain dicts) written to CSV or JSON Lines, streamed so that long exports stay small."""

from __future__ import annotations

import csv
import json
import os
from collections.abc import Iterable
from typing import Any

from ..errors import InputError

FORMATS = ("csv", "jsonl")


def _cell(v: Any) -> str:
    if v is None:
        return ""
    if isinstance(v, dict | list | tuple):
        return json.dumps(v, ensure_ascii=False, sort_keys=True, separators=(",", ":"))
    if isinstance(v, bool):
        return "true" if v else "false"
    return str(v)


def export_rows(rows: Iterable[dict[str, Any]], path: str | os.PathLike[str], fmt: str = "csv",
                columns: list[str] | None = None) -> int:
    """Write ``rows`` to ``path`` as ``csv`` (header from ``columns`` or the first row; nested values
    as compact JSON) or ``jsonl`` (one JSON object a line, keys sorted). Returns the number of rows."""
    if fmt not in FORMATS:
        raise InputError(f"{path}: unknown export format {fmt!r}; use csv or jsonl")
    n = 0
    try:
        with open(path, "w", encoding="utf-8", newline="") as f:
            if fmt == "jsonl":
                for row in rows:
                    f.write(json.dumps(row, ensure_ascii=False, sort_keys=True, allow_nan=False) + "\n")
                    n += 1
                return n
            writer = None
            for row in rows:
                if writer is None:
                    cols = list(columns) if columns else list(row)
                    writer = csv.writer(f, lineterminator="\r\n")  # RFC 4180 line ends
                    writer.writerow(cols)
                extra = set(row) - set(cols)
                if extra:
                    raise InputError(f"{path}: row {n + 1} has columns not in the header: {', '.join(sorted(extra))}")
                writer.writerow([_cell(row.get(c)) for c in cols])
                n += 1
            if writer is None and columns:
                csv.writer(f, lineterminator="\r\n").writerow(columns)
    except OSError as e:
        raise InputError(f"{path}: cannot write the export ({e.strerror})") from e
    except ValueError as e:
        raise InputError(f"{path}: row {n + 1} cannot be written ({e})") from e
    return n
