"""The summary page's pictures show the ledger's figures: the per-draw disagreement interval, the
reliability bins and the confusion table, each checked against a reference library.

Outside sources: statsmodels ``proportion_confint(method="wilson")`` (Wilson 1927 score interval);
scikit-learn ``calibration_curve(strategy="uniform")`` for the share agreeing and mean confidence per
equal-width bin (Guo et al. 2017, section 2); scikit-learn ``confusion_matrix`` for the table.
"""

from __future__ import annotations

import re

import numpy as np
import pytest
from sklearn.calibration import calibration_curve
from sklearn.metrics import confusion_matrix
from statsmodels.stats.proportion import proportion_confint

from casefile.review import record_review
from casefile.review.accounts import add_reader
from casefile.server.charts import draw_rates_svg, rate_x, rel_y, reliability_svg
from tests.server.client import Client
from tests.server.conftest import PASSWORDS

ATTR = re.compile(r'(data-[a-z]+)="([^"]*)"')


def marks(html: str, cls: str) -> list[dict[str, str]]:
    return [dict(ATTR.findall(m.group(1))) for m in re.finditer(rf'<g class="{cls}" ([^>]*)>', html)]


@pytest.fixture()
def read(ledger, built):
    """Readings by three readers on the draw's members (ben's first one comes from the fixture)."""
    add_reader(ledger, "cy", "cy-reads-castings", "cy-reads-castings")
    d = built["draw_id"]
    m = built["members"]
    labels = {c: ledger.case(c).entry.body["result"]["label"] for c in m}
    other = {c: next(x for x in ("sound", "porosity", "crack") if x != labels[c]) for c in m}
    record_review(ledger, m[0], reader="ana", verdict="agree", draw_id=d)
    record_review(ledger, m[1], reader="ana", verdict="disagree", label=other[m[1]], draw_id=d)
    record_review(ledger, m[1], reader="ben", verdict="agree", draw_id=d)
    record_review(ledger, m[2], reader="cy", verdict="unsure", draw_id=d)
    record_review(ledger, m[2], reader="ana", verdict="agree", draw_id=d)
    return labels


def test_summary_pictures_show_the_ledgers_figures(server, built, read):
    base, ledger, _ = server
    c = Client(base)
    assert c.sign_in("ana", PASSWORDS["ana"]).status == 303
    page = c.get("/summary")
    assert page.status == 200
    (rate,) = marks(page.text, "rate")
    # members with any "disagree": m[0] (ben) and m[1] (ana); reviewed: all three
    low, high = proportion_confint(2, 3, alpha=0.05, method="wilson")
    assert rate["data-draw"] == built["draw_id"]
    assert float(rate["data-rate"]) == pytest.approx(2 / 3, abs=1e-6)
    assert float(rate["data-low"]) == pytest.approx(low, abs=1e-6)
    assert float(rate["data-high"]) == pytest.approx(high, abs=1e-6)

    points = []  # (confidence, agreed) per current agree/disagree reading
    for e in ledger.entries("review"):
        if e.body["verdict"] != "unsure":
            conf = ledger.case(e.body["case_id"]).entry.body["result"]["confidence"]
            points.append((conf, e.body["verdict"] == "agree"))
    y = np.array([a for _, a in points], dtype=int)
    p = np.array([c for c, _ in points])
    share, mean_conf = calibration_curve(y, p, n_bins=10, strategy="uniform")
    bins = sorted(marks(page.text, "bin"), key=lambda b: float(b["data-low"]))
    assert sum(int(b["data-n"]) for b in bins) == len(points)
    assert [float(b["data-share"]) for b in bins] == pytest.approx(list(share), abs=1e-6)
    assert [float(b["data-confidence"]) for b in bins] == pytest.approx(list(mean_conf), abs=1e-6)

    model, reader = [], []
    for e in ledger.entries("review"):
        if e.body["verdict"] == "unsure":
            continue
        ml = read[e.body["case_id"]]
        model.append(ml)
        reader.append(ml if e.body["verdict"] == "agree" else e.body["label"])
    labels = sorted(set(model) | set(reader))
    want = confusion_matrix(model, reader, labels=labels)
    for i, m in enumerate(labels):
        for j, r in enumerate(labels):
            cell = re.search(rf'data-model="{m}" data-reader="{r}">(\d+)<', page.text)
            assert cell and int(cell.group(1)) == want[i, j], (m, r)


def test_marks_sit_where_their_values_say():
    svg = draw_rates_svg([{"draw_id": "d-0123456789ab", "plan": "random", "members": 10, "reviewed": 10,
                           "disagreements": 3, "rate": 0.3, "wilson_95": [0.1078, 0.6032]}])
    low, high = proportion_confint(3, 10, alpha=0.05, method="wilson")
    assert (low, high) == pytest.approx((0.1078, 0.6032), abs=1e-4)  # statsmodels agrees with the input
    assert f'cx="{rate_x(0.3):.2f}"' in svg and f'x1="{rate_x(0.1078):.2f}"' in svg
    empty = draw_rates_svg([{"draw_id": "d-0123456789ab", "plan": "lot", "members": 5, "reviewed": 0,
                             "disagreements": 0, "rate": None, "wilson_95": None}])
    assert "no readings yet" in empty and 'class="rate"' not in empty
    rel = reliability_svg({"bins": [{"low": 0.8, "high": 0.9, "n": 4, "mean_confidence": 0.85,
                                     "agree_share": 0.75}], "n": 4})
    assert f'cy="{rel_y(0.75):.2f}"' in rel and 'data-n="4"' in rel
