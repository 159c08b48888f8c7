"""A small real ledger for the review-page tests: a seeded tiny model explains four generated 32 x 32
pictures through the pipeline (display image, raw maps and overlays as blobs), a random draw takes three
of the four, and two readers have accounts; ``ben`` has already read one case. Also a live server on a free
loopback port, driven by the tests through http.client and a headless Chromium."""

from __future__ import annotations

import json
import threading
import warnings
from pathlib import Path

import numpy as np
import pytest
import torch
from PIL import Image

from casefile.ledger import Ledger
from casefile.models import load_model
from casefile.pipeline import RunSettings, explain_batch
from casefile.review import draw, record_review
from casefile.review.accounts import add_reader
from demo_cases.nets import tiny_net
from demo_cases.train import ENTRY_POINT

PASSWORDS = {"ana": "ana-reads-castings", "ben": "ben-reads-castings"}


def _picture(rng: np.random.Generator, spot: tuple[int, int]) -> np.ndarray:
    yy, xx = np.mgrid[0:32, 0:32]
    img = 60 + 20 * rng.random((32, 32))
    img += 150 * np.exp(-((xx - spot[0]) ** 2 + (yy - spot[1]) ** 2) / 18.0)
    return np.clip(img, 0, 255).astype(np.uint8)


@pytest.fixture(scope="session")
def built(tmp_path_factory) -> dict:
    d = tmp_path_factory.mktemp("review-page")
    torch.manual_seed(7)
    net = tiny_net(width=2).eval()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        torch.save(net.state_dict(), d / "tiny.pt")
    card = {"name": "tiny-page", "version": "1", "labels": ["sound", "porosity", "shrinkage", "crack"],
            "input": {"width": 32, "height": 32, "channels": 1}, "normalisation": {"mean": [0.5], "std": [0.25]},
            "windowing": "file", "layer": "features.block3", "roi": {"rule": "border", "pixels": 4},
            "intended_use": "tests only", "entry_point": ENTRY_POINT, "entry_point_args": {"width": 2},
            "weights": "tiny.pt"}
    (d / "card.json").write_text(json.dumps(card, indent=2) + "\n")
    rng = np.random.default_rng(3)
    inputs = []
    for i, spot in enumerate([(8, 9), (22, 20), (16, 12), (10, 24)]):
        p = d / f"part_{i:04d}.png"
        Image.fromarray(_picture(rng, spot)).save(p)
        inputs.append(p)
    store = d / "base.db"
    led = Ledger(str(store))
    loaded = load_model(d / "tiny.pt", d / "card.json", trusted_entry_points=(ENTRY_POINT,))
    summary = explain_batch(led, inputs, loaded, RunSettings(methods=("gradcam", "occlusion"), patch=8, stride=4),
                            progress=False)
    assert summary.recorded == 4, summary.text()
    entry = draw(led, "random", size=3, seed=1)
    for reader, pw in PASSWORDS.items():
        add_reader(led, reader, pw, pw)
    first = entry.body["members"][0]["case_id"]
    record_review(led, first, reader="ben", verdict="disagree", label="crack", note="ben-secret-note",
                  draw_id=entry.body["draw_id"])
    members = [m["case_id"] for m in entry.body["members"]]
    outside = next(r["case_id"] for r in led.cases() if r["case_id"] not in members)
    led.close()
    return {"store": store, "draw_id": entry.body["draw_id"], "first": first, "members": members,
            "outside": outside}


@pytest.fixture()
def ledger(built, tmp_path):
    """A fresh copy of the built ledger for one test."""
    path = tmp_path / "page.db"
    path.write_bytes(Path(built["store"]).read_bytes())
    led = Ledger(str(path))
    yield led
    led.close()


class Clock:
    """A clock the tests move forward (seconds)."""

    def __init__(self, start: float = 1_800_000_000.0) -> None:
        self.now = start

    def __call__(self) -> float:
        return self.now


@pytest.fixture()
def clock() -> Clock:
    return Clock()


@pytest.fixture()
def server(ledger, clock):
    """The review page on a free loopback port, in a thread; yields (base url, ledger, clock)."""
    from werkzeug.serving import make_server

    from casefile.server import create_app

    app = create_app(ledger, session_minutes=30, clock=clock)
    srv = make_server("127.0.0.1", 0, app, threaded=True)  # as casefile serve runs it
    t = threading.Thread(target=srv.serve_forever, daemon=True)
    t.start()
    try:
        yield f"http://127.0.0.1:{srv.server_port}", ledger, clock
    finally:
        srv.shutdown()
        srv.server_close()
        t.join(timeout=10)
