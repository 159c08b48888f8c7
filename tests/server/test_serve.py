"""``casefile serve`` as a reader starts it, signing out, and the pictures the case page loads.

Outside sources: RFC 9110 (HTTP semantics) sections 15.3.1 and 15.4.4 for 200 and 303; the PNG
specification (ISO/IEC 15948, W3C PNG) as decoded by Pillow, a reference library, for the pictures;
RFC 6265 section 5.2.2 for a cookie removed with Max-Age=0.
"""

from __future__ import annotations

import http.client
import io
import os
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path
from urllib.parse import urlsplit

import numpy as np
from PIL import Image

from tests.server.client import Client
from tests.server.conftest import PASSWORDS

ROOT = Path(__file__).resolve().parents[2]


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_casefile_serve_answers_on_loopback_and_stops(ledger):
    port = free_port()
    proc = subprocess.Popen([sys.executable, "-m", "casefile.cli", "--store", str(ledger.path), "serve",
                             "--port", str(port)], cwd=ROOT, env=dict(os.environ), stderr=subprocess.PIPE,
                            text=True)
    try:
        line = proc.stderr.readline()
        assert f"review page at http://127.0.0.1:{port}/" in line
        deadline = time.monotonic() + 20
        while True:
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{port}/sign-in", timeout=5) as r:
                    assert r.status == 200 and b"Sign in to read cases" in r.read()
                break
            except OSError:
                assert time.monotonic() < deadline, "the page did not answer"
                time.sleep(0.2)
    finally:
        proc.terminate()
        proc.wait(timeout=20)
        proc.stderr.close()


def test_serve_refuses_a_missing_ledger_in_one_line(tmp_path):
    done = subprocess.run([sys.executable, "-m", "casefile.cli", "--store", str(tmp_path / "none.db"), "serve"],
                          cwd=ROOT, env=dict(os.environ), capture_output=True, text=True, timeout=60)
    assert done.returncode == 1 and done.stderr.count("\n") == 1 and "no ledger here" in done.stderr


def test_signing_out_ends_the_session(server):
    base, ledger, _ = server
    c = Client(base)
    assert c.sign_in("ben", PASSWORDS["ben"]).status == 303
    token = c.cookies["casefile_session"]
    queue = c.get("/queue")
    out = c.post("/sign-out", {"csrf": queue.csrf()})
    assert out.status == 303 and "casefile_session" not in c.cookies
    c.cookies["casefile_session"] = token  # the old token is worth nothing now
    assert c.get("/queue").status == 303


def test_the_pictures_are_pngs_of_the_case(server, built):
    base, ledger, _ = server
    c = Client(base)
    assert c.sign_in("ana", PASSWORDS["ana"]).status == 303
    where = f"/draws/{built['draw_id']}/cases/{built['members'][1]}"
    body = ledger.case(built["members"][1]).entry.body
    got = {}
    for name in ("image.png", "maps/gradcam/layer.png", "maps/occlusion/overlay.png"):
        got[name] = fetch(base, c, f"{where}/{name}")
    display = Image.open(io.BytesIO(got["image.png"]))
    assert display.size == (body["input"]["width"], body["input"]["height"])
    assert got["image.png"] == ledger.blob(body["input"]["display_blob"])
    layer = Image.open(io.BytesIO(got["maps/gradcam/layer.png"]))
    assert layer.mode == "RGBA" and layer.size == display.size
    gradcam = next(m for m in body["maps"] if m["method"] == "gradcam")
    raw = np.frombuffer(ledger.blob(gradcam["raw_blob"]), dtype="<f4").reshape(gradcam["shape"])
    alpha = np.asarray(layer)[..., 3]
    top = np.unravel_index(np.argmax(raw), raw.shape)
    assert alpha[top] == 255  # the map's maximum shows in full (the same size here: no resampling)
    assert (alpha[np.clip(raw, 0, None) < 0.15 * raw.max()] == 0).all()  # low values let the image through
    occlusion = next(m for m in body["maps"] if m["method"] == "occlusion")
    assert got["maps/occlusion/overlay.png"] == ledger.blob(occlusion["overlay_blob"])


def fetch(base: str, c: Client, path: str) -> bytes:
    parts = urlsplit(base)
    conn = http.client.HTTPConnection(parts.hostname, parts.port, timeout=30)
    conn.request("GET", path, headers={"Cookie": "; ".join(f"{k}={v}" for k, v in c.cookies.items())})
    resp = conn.getresponse()
    data = resp.read()
    conn.close()
    assert resp.status == 200 and resp.getheader("Content-Type") == "image/png", (path, resp.status)
    return data
