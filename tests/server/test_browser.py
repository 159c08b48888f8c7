"""The review page in a real browser (Debian's Chromium, headless, driven by Playwright): sign in, open
the queue, open a case, move the map-strength control, record a verdict, and find the review entry in
the ledger with the reader's id; the same core flow with JavaScript off. Screenshots of the queue, a
case page and the summary go to test-output/ to be looked at.

Outside sources: the HTML Living Standard (WHATWG) for what the form controls send (a range input's
value, radio buttons, select) and CSS Color Module Level 4 for computed ``opacity``; the Wilson score
interval from statsmodels ``proportion_confint(method="wilson")`` for the summary's mark.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from playwright.sync_api import sync_playwright
from statsmodels.stats.proportion import proportion_confint

from casefile.review import record_review
from tests.server.conftest import PASSWORDS

CHROMIUM = "/usr/bin/chromium"
SHOTS = Path(__file__).resolve().parents[2] / "test-output" / "review-page"


@pytest.fixture(scope="module")
def browser():
    with sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM, headless=True,
                              args=["--no-sandbox", "--disable-background-networking", "--disable-gpu"])
        yield b
        b.close()


def sign_in(page, base):
    page.goto(base + "/queue")
    assert page.url.endswith("/sign-in")
    page.fill("#reader", "ana")
    page.fill("#password", PASSWORDS["ana"])
    page.click("#sign-in")
    page.wait_for_load_state("load")
    assert page.url.endswith("/queue")
    assert page.inner_text("#who") == "ana"


def test_a_reader_reads_a_case_in_the_browser(server, built, browser):
    base, ledger, _ = server
    SHOTS.mkdir(parents=True, exist_ok=True)
    page = browser.new_page(viewport={"width": 1280, "height": 900})
    sign_in(page, base)
    assert page.inner_text("#waiting-count") == "3"
    page.screenshot(path=str(SHOTS / "queue.png"), full_page=True)

    target = built["members"][1]
    page.click(f"a[href$='/cases/{target}']")
    page.wait_for_load_state("load")
    assert page.url.endswith(f"/draws/{built['draw_id']}/cases/{target}")
    page.wait_for_load_state("load")  # the pictures, and the script that runs the control
    page.wait_for_function("document.getElementById('layer').complete && "
                           "document.getElementById('layer').naturalWidth > 0 && "
                           "document.getElementById('apply-opacity').hidden")
    assert page.evaluate("document.getElementById('display').naturalWidth") == 32
    assert page.is_hidden("#apply-opacity")  # with JavaScript the layer follows the control at once
    assert page.evaluate("getComputedStyle(document.getElementById('layer')).opacity") == "0.6"
    page.fill("#opacity", "20")
    assert page.evaluate("getComputedStyle(document.getElementById('layer')).opacity") == "0.2"
    assert page.inner_text("#opacity-value") == "20 %"
    assert "An explanation map shows which parts of the image influenced" in page.inner_text("#cautions")
    page.screenshot(path=str(SHOTS / "case.png"), full_page=True)

    page.click("#view-side")
    page.wait_for_load_state("load")
    assert page.locator(".side img.overlay").count() == 2  # Grad-CAM and occlusion beside the image
    page.screenshot(path=str(SHOTS / "case-side-by-side.png"), full_page=True)

    model_label = page.inner_text("#model-label")
    mine = next(lab for lab in ("porosity", "crack", "sound") if lab != model_label)
    seq_before, _ = ledger.head()
    page.check("input[name=verdict][value=disagree]")
    page.select_option("#label", mine)
    page.fill("#note", "edge of the field looks like shrinkage")
    page.click("#record")
    page.wait_for_load_state("load")
    assert "You said disagree" in page.inner_text("#my-verdict")
    new = list(ledger.entries(start=seq_before + 1))
    assert [e.kind for e in new] == ["review"]
    body = new[0].body
    assert (body["reader"], body["case_id"], body["verdict"], body["label"], body["draw_id"]) == \
        ("ana", target, "disagree", mine, built["draw_id"])
    assert body["note"] == "edge of the field looks like shrinkage"
    assert page.get_attribute("#next", "href").endswith(f"/cases/{built['members'][0]}")  # ana's next
    page.screenshot(path=str(SHOTS / "case-answered.png"), full_page=True)

    page.click("text=Summary")
    page.wait_for_load_state("load")
    assert "2 cases still wait for you" in page.inner_text("#held-back")
    assert page.locator("g.rate").count() == 0  # the draw's figure waits for ana's other two reads
    page.screenshot(path=str(SHOTS / "summary-while-cases-wait.png"), full_page=True)
    for case_id in (built["members"][0], built["members"][2]):
        record_review(ledger, case_id, reader="ana", verdict="agree", draw_id=built["draw_id"])
    page.reload()
    assert page.locator("#held-back").count() == 0
    mark = page.locator("g.rate")
    # three reviewed members, two with a disagreement: ben's on the first (from the fixture), ana's on the
    # second (just now in the browser); the third was agreed
    low, high = proportion_confint(2, 3, alpha=0.05, method="wilson")
    assert float(mark.get_attribute("data-rate")) == pytest.approx(2 / 3, abs=1e-6)
    assert float(mark.get_attribute("data-low")) == pytest.approx(low, abs=1e-6)
    assert float(mark.get_attribute("data-high")) == pytest.approx(high, abs=1e-6)
    page.screenshot(path=str(SHOTS / "summary.png"), full_page=True)
    page.close()


def test_the_core_flow_works_with_javascript_off(server, built, browser):
    base, ledger, _ = server
    context = browser.new_context(java_script_enabled=False, viewport={"width": 1100, "height": 900})
    page = context.new_page()
    sign_in(page, base)
    target = built["members"][2]
    page.click(f"a[href$='/cases/{target}']")
    page.wait_for_load_state("load")
    assert page.is_visible("#apply-opacity")
    page.fill("#opacity", "30")
    page.click("#apply-opacity")  # without JavaScript the page reloads at the chosen strength
    page.wait_for_load_state("load")
    assert "opacity=30" in page.url
    assert "op-30" in page.get_attribute("#layer", "class")
    page.check("input[name=verdict][value=unsure]")
    page.click("#record")
    page.wait_for_load_state("load")
    assert "You said unsure" in page.inner_text("#my-verdict")
    (review,) = [e.body for e in ledger.entries("review") if e.body["reader"] == "ana"]
    assert (review["case_id"], review["verdict"]) == (target, "unsure")
    page.screenshot(path=str(SHOTS / "case-without-javascript.png"), full_page=True)
    context.close()
