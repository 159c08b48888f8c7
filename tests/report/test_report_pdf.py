"""The period report as a reader gets it: pages drawn by poppler's pdftoppm and saved under test-output/,
text read back with pypdf; thin periods (none, no reviews, one case) say why instead of drawing nothing.

Outside sources: poppler's pdftoppm (reference renderer) and pypdf (reference library) read the PDF;
no outside source applies to which sentences a thin period gets, which is the project's rule (no empty
chart without a sentence, no division by zero).
"""

from __future__ import annotations

import io
import re
import shutil
import subprocess
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pytest
from PIL import Image
from pypdf import PdfReader

from casefile.cautions import REPORT_CAUTIONS
from casefile.report import period_figures, render_report

from .conftest import PERIOD

OUT = Path(__file__).resolve().parents[2] / "test-output" / "report"
MADE = datetime(2026, 11, 1, tzinfo=UTC)
PYTHON_LOOKS = re.compile(r"[{}]|\bNone\b|\bTrue\b|\bFalse\b|\bnan\b")
needs_poppler = pytest.mark.skipif(shutil.which("pdftoppm") is None, reason="poppler-utils (pdftoppm) not installed")


def _text(pdf: bytes) -> str:
    return "\n".join(p.extract_text() or "" for p in PdfReader(io.BytesIO(pdf)).pages)


def _flat(text: str) -> str:
    return re.sub(r"\s+", " ", text)


def _pages(pdf: bytes, name: str) -> list[Path]:
    """Draw every page with pdftoppm at 100 dpi into test-output/report/NAME-N.png."""
    OUT.mkdir(parents=True, exist_ok=True)
    src = OUT / f"{name}.pdf"
    src.write_bytes(pdf)
    for old in OUT.glob(f"{name}-*.png"):
        old.unlink()
    subprocess.run(["pdftoppm", "-r", "100", "-png", str(src), str(OUT / name)], check=True, timeout=120)
    return sorted(OUT.glob(f"{name}-*.png"))


@pytest.fixture(scope="module")
def full(scenario):
    from casefile.ledger import Ledger

    with Ledger(scenario) as led:
        fig = period_figures(led, *PERIOD)
    return fig, render_report(fig, made_at=MADE)


def test_report_text_carries_the_head_hash_and_every_section(full):
    fig, pdf = full
    text = _flat(_text(pdf))
    assert fig["ledger"]["head_hash"] in text.replace(" ", "")
    assert f"entries 1 to {fig['ledger']['head_seq']}" in text
    for heading in ("Key figures", "Cases per day and model version", "Status and flags per day", "Check outcomes",
                    "Confidence against the previous period", "Second reads: disagreement per draw",
                    "Model label against reader label", "Reliability of confidence against readers",
                    "Failed attempts by reason", "Verification"):
        assert heading in text
    # axes say what they count and in which unit
    for axis in ("cases per day", "share of the day's cases (%)", "model confidence in its output label (probability",
                 "disagreement rate (% of reviewed cases)", "readings agreeing with the model (%)",
                 "day recorded (UTC)"):
        assert axis in text
    assert "Kolmogorov" in text and f"D = {fig['confidence']['ks']['statistic']:.3f}" in text
    assert f"{fig['reads']['reliability']['ece']:.3f}" in text
    assert not PYTHON_LOOKS.search(text), PYTHON_LOOKS.search(text)


def test_every_page_carries_the_cautions_and_the_head(full):
    fig, pdf = full
    pages = PdfReader(io.BytesIO(pdf)).pages
    assert len(pages) >= 2
    for page in pages:
        text = _flat(page.extract_text() or "")
        assert "Read before use" in text
        assert _flat(REPORT_CAUTIONS[-1]) in text
        assert f"ledger head seq {fig['ledger']['head_seq']}" in text


def test_same_figures_same_bytes(full):
    fig, pdf = full
    assert render_report(fig, made_at=MADE) == pdf


@needs_poppler
def test_pages_render_and_are_saved(full):
    _, pdf = full
    pngs = _pages(pdf, "full")
    assert len(pngs) == len(PdfReader(io.BytesIO(pdf)).pages)
    for png in pngs:
        a = np.asarray(Image.open(png).convert("L"))
        assert a.shape[0] > a.shape[1]  # A4 portrait
        assert (a < 128).mean() > 0.01  # ink on the page, not a blank render


def _bare_ledger(tmp_path, n_cases, *, days=10, start="2026-09-01"):
    from casefile.ledger import Ledger
    from demo_cases.period import populate

    led = Ledger(str(tmp_path / "thin.db"))
    if n_cases:
        populate(led, n_cases, start=start, days=days, seed=5)
    return led


def _sentences_in(pdf: bytes, fig) -> str:
    text = _flat(_text(pdf))
    for s in fig["sentences"].values():
        assert _flat(s) in text, s
    assert not PYTHON_LOOKS.search(text), PYTHON_LOOKS.search(text)
    return text


@needs_poppler
def test_an_empty_period_says_so(tmp_path):
    led = _bare_ledger(tmp_path, 20)
    fig = period_figures(led, "2027-01-01", "2027-01-31")
    assert fig["cases"]["total"] == 0 and fig["status"]["flagged_share"] is None
    assert set(fig["sentences"]) >= {"cases", "status", "checks", "confidence", "reads", "failures"}
    pdf = render_report(fig, made_at=MADE)
    text = _sentences_in(pdf, fig)
    assert "No case was recorded in this period." in text
    assert fig["ledger"]["head_hash"] in text.replace(" ", "")
    assert _pages(pdf, "empty")


@needs_poppler
def test_a_period_without_reviews_gives_no_reader_charts(tmp_path):
    led = _bare_ledger(tmp_path, 200, days=20)
    fig = period_figures(led, "2026-09-11", "2026-09-20")
    assert fig["cases"]["total"] > 0 and fig["confidence"]["ks"] is not None
    assert fig["reads"]["overall"]["rate"] is None and fig["reads"]["reliability"]["ece"] is None
    pdf = render_report(fig, made_at=MADE)
    text = _sentences_in(pdf, fig)
    assert "No second reading of this period's cases is recorded" in text
    assert "disagreement rate (% of reviewed cases)" not in text  # no interval chart
    assert "readings agreeing with the model (%)" not in text  # no reliability diagram
    assert _pages(pdf, "no-reviews")


@needs_poppler
def test_a_model_with_one_case(tmp_path):
    led = _bare_ledger(tmp_path, 0)
    from demo_cases.period import case_bodies

    body = next(case_bodies(1, start="2026-09-03", days=1, seed=9))
    led.append("case", body)
    fig = period_figures(led, "2026-09-01", "2026-09-07", model="tiny-cast")
    assert fig["cases"]["total"] == 1 and fig["confidence"]["ks"] is None
    assert "at least 5 cases" in fig["sentences"]["confidence"]
    pdf = render_report(fig, made_at=MADE)
    text = _sentences_in(pdf, fig)
    assert "1 of 1" in text  # the flag line names its n
    assert _pages(pdf, "one-case")


def test_a_model_filter_counts_only_that_version(scenario):
    from casefile.ledger import Ledger

    with Ledger(scenario) as led:
        both = period_figures(led, *PERIOD)
        one = period_figures(led, *PERIOD, model="tiny-cast@1.1")
    assert one["cases"]["total"] == sum(both["cases"]["by_model"]["tiny-cast@1.1"]) and one["cases"]["total"] > 0
    assert [m["model"] for m in one["cases"]["models"]] == ["tiny-cast@1.1"]
