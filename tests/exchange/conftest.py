"""Pytest fixtures for the exchange tests: the sheet room's synthetic case and rendered sheet, reused, and a
real archive (Debian's Orthanc) started on free loopback ports for one test."""

from __future__ import annotations

import importlib.util
import json
import shutil
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path
from typing import Any, NamedTuple

import pytest

_name = "casefile_test_sheet_conftest"
if _name not in sys.modules:
    _spec = importlib.util.spec_from_file_location(_name, Path(__file__).parent.parent / "sheet" / "conftest.py")
    sys.modules[_name] = importlib.util.module_from_spec(_spec)
    _spec.loader.exec_module(sys.modules[_name])

fx = sys.modules[_name].fx
sheet_pdf = sys.modules[_name].sheet_pdf


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def get(url: str, data: dict | None = None) -> bytes:
    req = urllib.request.Request(url, data=None if data is None else json.dumps(data).encode(),
                                 method="GET" if data is None else "POST")
    with urllib.request.urlopen(req, timeout=5) as r:
        return r.read()


class Archive(NamedTuple):
    """A running Orthanc: its REST base URL and DICOM port; ``json(path)`` asks its REST API."""

    base: str
    port: int

    def json(self, path: str, data: dict | None = None) -> Any:
        return json.loads(get(self.base + path, data))

    def raw(self, path: str) -> bytes:
        return get(self.base + path)


@pytest.fixture()
def unused_port() -> int:
    return free_port()


@pytest.fixture()
def orthanc(tmp_path):
    binary = shutil.which("Orthanc") or shutil.which("Orthanc", path="/usr/sbin")
    if binary is None:
        pytest.skip("the Orthanc archive is not installed (Debian package 'orthanc'); CI installs it")
    dicom_port, http_port = free_port(), free_port()
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
                json.loads(get(base + "/system"))
                break
            except OSError:
                time.sleep(0.25)
        else:
            pytest.fail("Orthanc REST API did not answer within 30 s")
        yield Archive(base, dicom_port)
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=15)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        log.close()
