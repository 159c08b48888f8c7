"""What a person sees on a terminal during `casefile explain`: failure lines above the progress bar, each
once and naming its path once, then the counts once.

Outside sources: tqdm (the progress-bar library) redraws its bar after ``tqdm.write``, the documented way
to print beside a bar; a terminal overwrites a line on carriage return (common practice, ECMA-48 CR).
"""

from __future__ import annotations

import io
import re

from casefile.cli import main
from demo_cases.train import ENTRY_POINT


class Terminal(io.StringIO):
    """Captured stderr that says it is a terminal, so the progress bar is drawn."""

    def isatty(self) -> bool:
        return True


def _screen(raw: str) -> list[str]:
    """The lines a terminal would leave: each carriage return starts its line again."""
    return [line.rsplit("\r", 1)[-1].rstrip() for line in raw.split("\n")]


def test_failures_go_above_the_bar_once_and_the_counts_once(tiny, tmp_path, monkeypatch):
    folder = tmp_path / "in"
    folder.mkdir()
    good = tiny["inputs"] / "part_0001.png"
    for i in range(3):
        (folder / f"good_{i}.png").write_bytes(good.read_bytes()[:-1] + bytes([i]) if i else good.read_bytes())
    (folder / "broken.png").write_bytes(good.read_bytes()[:50])
    (folder / "notes.txt").write_text("not an image\n")
    monkeypatch.setenv("CASEFILE_TRUSTED_ENTRY_POINTS", ENTRY_POINT)
    monkeypatch.setenv("CASEFILE_CONFIG_DIR", str(tmp_path / "config"))
    monkeypatch.setenv("CASEFILE_SITE_KEY", str(tmp_path / "site.key"))
    term = Terminal()
    monkeypatch.setattr("sys.stderr", term)
    code = main(["--store", str(tmp_path / "l.db"), "explain", "--model", str(tiny["weights"]), "--card",
                 str(tiny["card"]), "--patch", "8", "--stride", "4", str(folder)])
    raw = term.getvalue()
    assert code == 1
    assert "explain:" in raw and "%|" in raw  # the bar was drawn
    screen = [line for line in _screen(raw) if line]
    for name in ("broken.png", "notes.txt"):
        shown = [line for line in screen if name in line]
        assert len(shown) == 1, screen  # once
        assert shown[0].startswith(f"failed: {folder / name}: ") and shown[0].count(name) == 1  # the path once
    counts = [line for line in screen if line.startswith("recorded ")]
    assert counts == ["recorded 3, skipped as already recorded 0, failed 2"]
    assert not any(re.search(r"failed: .*%\|", line) for line in screen)  # no line mixes a failure and the bar
    bars = [line for line in screen if "%|" in line]
    assert bars and all(line.startswith("explain:") for line in bars)
    assert len([line for line in bars if "100%" in line]) == 1  # the final bar once
