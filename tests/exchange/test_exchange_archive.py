"""C-STORE of a case sheet to a real archive (Debian's Orthanc on loopback), found again by its own query.

Outside sources: DICOM PS3.4 (C-STORE and C-FIND services) as implemented by an independent archive,
Debian's Orthanc, started for the test.
"""

from __future__ import annotations

import io

import pydicom
import pytest

from casefile.exchange import ExchangeError, encapsulated_pdf_for_case, push


def test_push_sheet_and_find_it_in_the_archive(fx, sheet_pdf, orthanc):
    port = orthanc.port
    case, _ = fx.build_case()
    ds = encapsulated_pdf_for_case(case, sheet_pdf, entry_hash=fx.ENTRY_HASH)
    (status,) = push([ds], "127.0.0.1", port, "ORTHANC")
    assert status.status == 0x0000 and status.ok  # PS3.4 B.2.3: 0000 = success
    # the archive's own query (Orthanc REST /tools/find) at series level, by study UID and modality
    found = orthanc.json("/tools/find", {"Level": "Series", "Expand": True, "Query": {
        "StudyInstanceUID": case["input"]["study_uid"], "Modality": "DOC"}})
    assert len(found) == 1 and found[0]["MainDicomTags"]["SeriesInstanceUID"] == ds.SeriesInstanceUID
    (instance,) = found[0]["Instances"]
    tags = orthanc.json(f"/instances/{instance}/simplified-tags")
    assert tags["SOPClassUID"] == "1.2.840.10008.5.1.4.1.1.104.1" and tags["Modality"] == "DOC"
    stored = pydicom.dcmread(io.BytesIO(orthanc.raw(f"/instances/{instance}/file")))
    assert stored.EncapsulatedDocument[: len(sheet_pdf)] == sheet_pdf  # the archive kept the PDF intact


def test_unreachable_archive_is_a_clear_error(fx, sheet_pdf, unused_port):
    case, _ = fx.build_case()
    ds = encapsulated_pdf_for_case(case, sheet_pdf)
    port = unused_port  # nothing listens there
    with pytest.raises(ExchangeError, match=r"archive ORTHANC@127.0.0.1:\d+: cannot connect"):
        push([ds], "127.0.0.1", port, "ORTHANC", timeout=2)
    assert push([], "127.0.0.1", port, "ORTHANC") == []  # nothing to send: no connection made


def test_bad_ae_title_is_refused_before_connecting():
    with pytest.raises(ExchangeError, match="AE title"):
        push([], "127.0.0.1", 1, "A" * 17)  # PS3.5 6.2: AE titles have at most 16 characters
