"""The exchange room: case sheets as DICOM objects, C-STORE to an archive, and audit-row exports."""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from pydicom.dataset import Dataset

from ..errors import InputError
from .dicom import NO_DICOM_SOURCE, encapsulated_pdf, encapsulated_pdf_for_case, save, secondary_capture
from .errors import ExchangeError
from .patient import EMPTY_PATIENT, PATIENT_MODULE, PatientModule, patient_from
from .push import StoreStatus, push
from .rows import export_rows

__all__ = ["EMPTY_PATIENT", "ExchangeError", "ExportOutcome", "NO_DICOM_SOURCE", "PATIENT_MODULE", "PatientModule",
           "StoreStatus", "encapsulated_pdf", "encapsulated_pdf_for_case", "export_case", "export_rows",
           "patient_from", "push", "save", "secondary_capture"]


@dataclass(frozen=True)
class ExportOutcome:
    """What an export wrote: the PDF path, the DICOM path and object (or None and the reason why not)."""

    pdf_path: Path | None
    dicom_path: Path | None
    dataset: Dataset | None
    reason: str = ""


def export_case(case: dict, pdf_bytes: bytes, *, dicom_path: str | os.PathLike[str] | None = None,
                pdf_path: str | os.PathLike[str] | None = None, entry_hash: str | None = None,
                patient_module: dict[str, Any] | None = None) -> ExportOutcome:
    """Write the sheet of ``case`` as a DICOM Encapsulated PDF (when the source was a DICOM study)
    and/or as a plain PDF. For a non-DICOM source the PDF is still written (at ``pdf_path``, else next
    to ``dicom_path`` with the suffix .pdf) and ``reason`` says why no DICOM object was made."""
    pdf_out = Path(pdf_path) if pdf_path is not None else None
    try:
        ds = encapsulated_pdf_for_case(case, pdf_bytes, entry_hash=entry_hash, patient_module=patient_module)
    except ExchangeError as e:
        if dicom_path is not None and pdf_out is None:
            pdf_out = Path(dicom_path).with_suffix(".pdf")
        if pdf_out is not None:
            _write(pdf_out, pdf_bytes)
        return ExportOutcome(pdf_out, None, None, str(e))
    if pdf_out is not None:
        _write(pdf_out, pdf_bytes)
    dcm_out = Path(dicom_path) if dicom_path is not None else None
    if dcm_out is not None:
        save(ds, dcm_out)
    return ExportOutcome(pdf_out, dcm_out, ds)


def _write(path: Path, data: bytes) -> None:
    try:
        path.write_bytes(data)
    except OSError as e:
        raise InputError(f"{path}: cannot write the PDF ({e.strerror})") from e
