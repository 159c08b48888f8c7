"""C-STORE of a case sheet to a real archive (Debian's Orthanc on loopback), found again by its own query."""

from __future__ import annotations

import io
import json
import shutil
import socket
import subprocess
import time
import urllib.request

import pydicom
import pytest

from casefile.exchange import ExchangeError, encapsulated_pdf_for_case, push


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _get(url: str, data: dict | None = None) -> bytes:
    req = urllib.request.Request(url, data=None if data is None else json.dumps(data).encode(),
                                 method="GET" if data is None else "POST")
    with urllib.request.urlopen(req, timeout=5) as r:
        return r.read()


@pytest.fixture()
def orthanc(tmp_path):
    binary = shutil.which("Orthanc") or shutil.which("Orthanc", path="/usr/sbin")
    if binary is None:
        pytest.skip("the Orthanc archive is not installed (Debian package 'orthanc'); CI installs it")
    dicom_port, http_port = _free_port(), _free_port()
    config = {
        "Name": "casefile-test", "StorageDirectory": str(tmp_path / "storage"),
        "IndexDirectory": str(tmp_path / "index"), "DicomAet": "ORTHANC", "DicomPort": dicom_port,
        "HttpPort": http_port, "RemoteAccessAllowed": False, "AuthenticationEnabled": False,
        "DicomCheckCalledAet": False, "DicomAlwaysAllowStore": True, "Plugins": [],
        "DicomModalities": {}, "StableAge": 1, "HttpServerEnabled": True, "DicomServerEnabled": True,
    }
    cfg = tmp_path / "orthanc.json"
    cfg.write_text(json.dumps(config))
    log = open(tmp_path / "orthanc.log", "w")
    proc = subprocess.Popen([binary, str(cfg)], stdout=log, stderr=subprocess.STDOUT)
    base = f"http://127.0.0.1:{http_port}"
    try:
        for _ in range(120):  # up to about 30 s on a busy machine
            if proc.poll() is not None:
                pytest.fail(f"Orthanc stopped at start: {(tmp_path / 'orthanc.log').read_text()[-500:]}")
            try:
                json.loads(_get(base + "/system"))
                break
            except OSError:
                time.sleep(0.25)
        else:
            pytest.fail("Orthanc REST API did not answer within 30 s")
        yield base, dicom_port
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        log.close()


def test_push_sheet_and_find_it_in_the_archive(fx, sheet_pdf, orthanc):
    base, port = orthanc
    case, _ = fx.build_case()
    ds = encapsulated_pdf_for_case(case, sheet_pdf, entry_hash=fx.ENTRY_HASH)
    (status,) = push([ds], "127.0.0.1", port, "ORTHANC")
    assert status.status == 0x0000 and status.ok  # PS3.4 B.2.3: 0000 = success
    # the archive's own query (Orthanc REST /tools/find) at series level, by study UID and modality
    found = json.loads(_get(base + "/tools/find", {"Level": "Series", "Expand": True, "Query": {
        "StudyInstanceUID": case["input"]["study_uid"], "Modality": "DOC"}}))
    assert len(found) == 1 and found[0]["MainDicomTags"]["SeriesInstanceUID"] == ds.SeriesInstanceUID
    (instance,) = found[0]["Instances"]
    tags = json.loads(_get(f"{base}/instances/{instance}/simplified-tags"))
    assert tags["SOPClassUID"] == "1.2.840.10008.5.1.4.1.1.104.1" and tags["Modality"] == "DOC"
    stored = pydicom.dcmread(io.BytesIO(_get(f"{base}/instances/{instance}/file")))
    assert stored.EncapsulatedDocument[: len(sheet_pdf)] == sheet_pdf  # the archive kept the PDF intact


def test_unreachable_archive_is_a_clear_error(fx, sheet_pdf):
    case, _ = fx.build_case()
    ds = encapsulated_pdf_for_case(case, sheet_pdf)
    port = _free_port()  # nothing listens there
    with pytest.raises(ExchangeError, match=r"archive ORTHANC@127.0.0.1:\d+: cannot connect"):
        push([ds], "127.0.0.1", port, "ORTHANC", timeout=2)
    assert push([], "127.0.0.1", port, "ORTHANC") == []  # nothing to send: no connection made


def test_bad_ae_title_is_refused_before_connecting():
    with pytest.raises(ExchangeError, match="AE title"):
        push([], "127.0.0.1", 1, "A" * 17)  # PS3.5 6.2: AE titles have at most 16 characters
