"""Reader-versus-reader agreement: Fleiss' kappa against statsmodels on published tables, Cohen's against
scikit-learn, and the figures `stats` reports when cases have several readers.

Outside sources:
- Fleiss (1971), "Measuring nominal scale agreement among many raters", Psychological Bulletin 76(5):
  30 patients, 6 psychiatrists each, 5 diagnoses. The table below is the one R's irr package ships as
  ``diagnoses`` and statsmodels' own tests use (statsmodels/stats/tests/test_inter_rater.py); Fleiss
  reported kappa = 0.430 (from memory).
- The worked example on Wikipedia's "Fleiss' kappa" page (10 subjects, 14 raters, 5 categories,
  kappa = 0.210), also in statsmodels' tests.
- statsmodels.stats.inter_rater.fleiss_kappa and sklearn.metrics.cohen_kappa_score as references.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics import cohen_kappa_score
from statsmodels.stats.inter_rater import aggregate_raters
from statsmodels.stats.inter_rater import fleiss_kappa as sm_fleiss

from casefile.review.agreement import fleiss_kappa
from casefile.review.stats import summarise_data
from casefile.review.text import format_text

# Fleiss (1971): rows are patients, columns the 6 raters, values the diagnosis (1..5)
DIAGNOSES = np.array([
    [4, 4, 4, 4, 4, 4], [2, 2, 2, 5, 5, 5], [2, 3, 3, 3, 3, 5], [5, 5, 5, 5, 5, 5], [2, 2, 2, 4, 4, 4],
    [1, 1, 3, 3, 3, 3], [3, 3, 3, 3, 5, 5], [1, 1, 3, 3, 3, 4], [1, 1, 4, 4, 4, 4], [5, 5, 5, 5, 5, 5],
    [1, 4, 4, 4, 4, 4], [1, 2, 4, 4, 4, 4], [2, 2, 2, 3, 3, 3], [1, 4, 4, 4, 4, 4], [2, 2, 4, 4, 4, 5],
    [3, 3, 3, 3, 3, 5], [1, 1, 1, 4, 5, 5], [1, 1, 1, 1, 1, 2], [2, 2, 4, 4, 4, 4], [1, 3, 3, 5, 5, 5],
    [5, 5, 5, 5, 5, 5], [2, 4, 4, 4, 4, 4], [2, 2, 4, 5, 5, 5], [1, 1, 4, 4, 4, 4], [1, 4, 4, 4, 4, 5],
    [2, 2, 2, 2, 2, 4], [1, 1, 1, 1, 5, 5], [2, 2, 4, 4, 4, 4], [1, 3, 3, 3, 3, 3], [5, 5, 5, 5, 5, 5],
])

# Wikipedia's worked example: per subject, how many of 14 raters chose each of 5 categories
WIKIPEDIA_COUNTS = np.array([
    [0, 0, 0, 0, 14], [0, 2, 6, 4, 2], [0, 0, 3, 5, 6], [0, 3, 9, 2, 0], [2, 2, 8, 1, 1],
    [7, 7, 0, 0, 0], [3, 2, 6, 3, 0], [2, 5, 3, 2, 2], [6, 5, 2, 1, 0], [0, 2, 2, 3, 7],
])


def _labels_from_counts(counts):
    return [[j for j, c in enumerate(row) for _ in range(int(c))] for row in counts]


def test_fleiss_1971_table_matches_statsmodels():
    table, _ = aggregate_raters(DIAGNOSES)
    assert fleiss_kappa(DIAGNOSES.tolist()) == pytest.approx(sm_fleiss(table), abs=1e-12)
    assert fleiss_kappa(DIAGNOSES.tolist()) == pytest.approx(0.430, abs=5e-4)  # Fleiss 1971, from memory


def test_wikipedia_worked_example_matches_statsmodels():
    ours = fleiss_kappa(_labels_from_counts(WIKIPEDIA_COUNTS))
    assert ours == pytest.approx(sm_fleiss(WIKIPEDIA_COUNTS), abs=1e-12)
    assert ours == pytest.approx(0.210, abs=5e-4)  # the page's value


@settings(max_examples=60, deadline=None)
@given(st.integers(3, 6).flatmap(lambda m: st.lists(st.lists(st.sampled_from("abc"), min_size=m, max_size=m),
                                                      min_size=2, max_size=25)))
def test_fleiss_matches_statsmodels_property(ratings):
    table, _ = aggregate_raters(np.array(ratings))
    with np.errstate(invalid="ignore", divide="ignore"):  # statsmodels divides 0 by 0 for one category
        ref = sm_fleiss(table)
    ours = fleiss_kappa(ratings)
    if ours is None:  # every rating the same category: 0/0
        assert np.isnan(ref) or table.shape[1] == 1
    else:
        assert ours == pytest.approx(ref, abs=1e-9)


def test_stats_reports_cohen_per_pair_and_fleiss_for_three_readers():
    # 30 cases read by three of Fleiss's raters: the model said "1" every time, so "agree" means 1
    readers = ["r1", "r2", "r3"]
    labels = {f"c{i:02d}": "1" for i in range(30)}
    reviews = []
    for i, row in enumerate(DIAGNOSES[:, :3]):
        for reader, lab in zip(readers, row, strict=True):
            v = {"verdict": "agree"} if lab == 1 else {"verdict": "disagree", "label": str(lab)}
            reviews.append({"case_id": f"c{i:02d}", "reader": reader, **v})
    s = summarise_data([], reviews, labels)
    ag = s["agreement"]
    table, _ = aggregate_raters(DIAGNOSES[:, :3])
    assert ag["fleiss"]["kappa"] == pytest.approx(sm_fleiss(table), abs=1e-12)
    assert ag["fleiss"]["cases"] == 30 and ag["fleiss"]["readers"] == readers
    for pair in ag["reader_pairs"]:
        a, b = (readers.index(r) for r in pair["readers"])
        ref = cohen_kappa_score(DIAGNOSES[:, a], DIAGNOSES[:, b])  # reference: scikit-learn
        assert pair["kappa"] == pytest.approx(ref, abs=1e-12) and pair["cases"] == 30
    assert ag["model_vs_reader"]["readings"] == 90
    text = format_text(s)
    assert "Fleiss' kappa, r1, r2, r3:" in text and "(n = 30 cases labelled by all 3 readers)" in text
    assert "(n = 30 cases read by both)" in text and "(n = 90 readings)" in text
    # readers disagree with each other wherever the three labels differ
    split = [f"c{i:02d}" for i, row in enumerate(DIAGNOSES[:, :3]) if len(set(row)) > 1]
    assert s["reader_conflicts"]["cases"] == split and s["reader_conflicts"]["open"] == split
