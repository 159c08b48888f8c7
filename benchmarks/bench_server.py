"""Prints how the review page's queue, case and summary pages scale with the ledger (ratios, measured in
one run), and what a sign-in costs (scrypt) against an ordinary page. Invented case bodies, no model."""

from __future__ import annotations

import hashlib
import re
import sys
import tempfile
import time
from pathlib import Path

from casefile.ledger import Ledger
from casefile.review import draw, record_review
from casefile.review.accounts import add_reader
from casefile.server import create_app

PASSWORD = "bench reader password"


def _digest(text: str) -> str:
    return hashlib.sha256(text.encode()).hexdigest()


def _case(i: int) -> dict:
    label = "crack" if i % 3 == 0 else "sound"
    return {"case_id": f"cb-{i:06d}", "recorded_at": "2026-11-01T10:00:00Z", "software": {"casefile": "0.1.0"},
            "input": {"file_name": f"p{i}.png", "file_sha256": _digest(f"f{i}"), "pixel_sha256": _digest(f"p{i}"),
                      "kind": "raster", "width": 32, "height": 32},
            "model": {"name": "bench", "version": "1", "digest": _digest("m"), "labels": ["sound", "crack"]},
            "preprocessing": {}, "settings": {}, "settings_digest": _digest(f"s{i}"),
            "result": {"label": label, "label_index": 0, "confidence": 0.5 + (i % 50) / 100,
                       "scores": {"sound": 0.5, "crack": 0.5}},
            "maps": [], "checks": [], "status": "pass"}


def _ledger(folder: Path, n: int) -> tuple[Ledger, str, str]:
    led = Ledger(str(folder / f"bench-{n}.db"), synchronous="NORMAL")
    led.append_many([("case", _case(i), None) for i in range(n)])
    d = draw(led, "random", size=max(n // 10, 1), seed=1)
    add_reader(led, "reader-a", PASSWORD, PASSWORD)
    members = [m["case_id"] for m in d.body["members"]]
    for k, case_id in enumerate(members[1:]):
        record_review(led, case_id, reader=f"other-{k % 3}", verdict="agree", draw_id=d.body["draw_id"])
    return led, d.body["draw_id"], members[0]


def _page_times(led: Ledger, draw_id: str, case_id: str) -> dict[str, float]:
    client = create_app(led).test_client()
    token = re.search(r'name="csrf" value="([^"]+)"', client.get("/sign-in").get_data(as_text=True)).group(1)
    out = {}
    start = time.perf_counter()
    client.post("/sign-in", data={"csrf": token, "reader": "reader-a", "password": PASSWORD})
    out["sign-in"] = time.perf_counter() - start
    for name, path in [("queue", "/queue"), ("case", f"/draws/{draw_id}/cases/{case_id}"), ("summary", "/summary")]:
        client.get(path)  # warm
        start = time.perf_counter()
        for _ in range(3):
            assert client.get(path).status_code == 200
        out[name] = (time.perf_counter() - start) / 3
    return out


def main() -> None:
    small_n, large_n = (int(a) for a in (sys.argv[1:3] if len(sys.argv) > 2 else ("500", "5000")))
    with tempfile.TemporaryDirectory() as tmp:
        small = _page_times(*_ledger(Path(tmp), small_n))
        large = _page_times(*_ledger(Path(tmp), large_n))
    print(f"ledger {small_n} -> {large_n} cases (x{large_n / small_n:.0f}), a draw of a tenth, read by three readers")
    for name in ("queue", "case", "summary"):
        print(f"  {name:<8} page time x{large[name] / small[name]:.1f}")
    print(f"  sign-in (scrypt N=2^14) costs x{small['sign-in'] / small['queue']:.1f} a queue page at {small_n} cases")


if __name__ == "__main__":
    main()
