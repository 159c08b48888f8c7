"""The error raised when a DICOM object cannot be made or an archive cannot take it (one-line message)."""

from __future__ import annotations

from .. import errors

# Proposed for casefile/errors.py; until it is there, the exchange room defines it itself.
ExchangeError: type[errors.CasefileError] = getattr(errors, "ExchangeError", None) or type(
    "ExchangeError", (errors.CasefileError,),
    {"__doc__": "A DICOM object cannot be made, or the archive refused it or cannot be reached.",
     "__module__": "casefile.errors"})
