"""Sends DICOM objects to an archive with C-STORE (pynetdicom) and reports each outcome in plain words."""

from __future__ import annotations

import logging
from collections.abc import Sequence
from dataclasses import dataclass

from pydicom.dataset import Dataset
from pydicom.uid import ExplicitVRLittleEndian, ImplicitVRLittleEndian

from .errors import ExchangeError


@dataclass(frozen=True)
class StoreStatus:
    """The archive's answer to one C-STORE: ``status`` as in PS3.4 Annex B.2.3, and what it means."""

    sop_instance_uid: str
    status: int
    meaning: str

    @property
    def ok(self) -> bool:
        return self.status == 0x0000 or (self.status & 0xF000) == 0xB000


def _meaning(status: int) -> str:
    """Plain words for C-STORE status codes (PS3.4 B.2.3 and PS3.7 C.4.2.1.4)."""
    if status == 0x0000:
        return "stored"
    if (status & 0xF000) == 0xB000:
        return "stored with a warning"
    if (status & 0xFF00) == 0xA700:
        return "refused: the archive is out of resources"
    if (status & 0xFF00) == 0xA900:
        return "refused: the object does not match the SOP class"
    if (status & 0xF000) == 0xC000:
        return "refused: the archive cannot understand the object"
    if status == 0x0122:
        return "refused: the archive does not support this SOP class"
    if status == 0x0124:
        return "refused: not authorised"
    return f"refused (status 0x{status:04X})"


def _check_aet(name: str, what: str) -> str:
    s = str(name)
    if not 1 <= len(s) <= 16 or s.strip() != s or "\\" in s or not s.isprintable():
        raise ExchangeError(f"{what} {s!r}: an AE title has 1 to 16 printable characters, no backslash "
                            "and no leading or trailing spaces (PS3.5 6.2)")
    return s


def push(
    datasets: Sequence[Dataset],
    host: str,
    port: int,
    called_aet: str,
    calling_aet: str = "CASEFILE",
    *,
    timeout: float = 10.0,
) -> list[StoreStatus]:
    """C-STORE each dataset to ``host:port`` in one association; returns one status per dataset.

    Raises ExchangeError (one line) when the archive cannot be reached, rejects the association,
    accepts none of the object types, aborts, or refuses any object.
    """
    from pynetdicom import AE

    where = f"archive {called_aet}@{host}:{port}"
    _check_aet(called_aet, "called AE title")
    ae = AE(ae_title=_check_aet(calling_aet, "calling AE title"))
    if not datasets:
        return []
    ae.acse_timeout = ae.dimse_timeout = ae.network_timeout = timeout
    ae.connection_timeout = timeout
    for sop_class in sorted({str(ds.SOPClassUID) for ds in datasets}):
        ae.add_requested_context(sop_class, [ExplicitVRLittleEndian, ImplicitVRLittleEndian])
    quiet = logging.getLogger("pynetdicom")
    level = quiet.level
    quiet.setLevel(logging.CRITICAL)  # our own one-line errors say what happened
    try:
        assoc = ae.associate(host, int(port), ae_title=called_aet)
        if not assoc.is_established:
            if assoc.is_rejected:
                raise ExchangeError(f"{where}: the archive rejected the association (check the AE titles)")
            raise ExchangeError(f"{where}: cannot connect (is the archive running and the port right?)")
        results: list[StoreStatus] = []
        try:
            for ds in datasets:
                uid = str(ds.SOPInstanceUID)
                try:
                    answer = assoc.send_c_store(ds)
                except ValueError as e:  # no accepted presentation context for this SOP class
                    raise ExchangeError(f"{where}: the archive does not accept {ds.SOPClassUID} ({e})") from e
                if not answer or "Status" not in answer:
                    raise ExchangeError(f"{where}: no answer for {uid} (connection lost or timed out)")
                status = int(answer.Status)
                results.append(StoreStatus(uid, status, _meaning(status)))
                if not results[-1].ok:
                    raise ExchangeError(f"{where}: {uid} {_meaning(status)}; {len(results) - 1} of "
                                        f"{len(datasets)} stored before it")
        finally:
            if assoc.is_established:
                assoc.release()
        return results
    except (OSError, RuntimeError) as e:
        raise ExchangeError(f"{where}: cannot connect ({e})") from e
    finally:
        quiet.setLevel(level)
