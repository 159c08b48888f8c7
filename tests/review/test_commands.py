"""The second-read commands as a user meets them: sample --minimum, review for a draw, adjudicate, stats.

Outside sources: none beyond POSIX's exit status 2 for a usage error (common practice, as argparse
does); the figures themselves are checked against scipy, scikit-learn and statsmodels elsewhere.
"""

from __future__ import annotations

import json

import pytest

from casefile.cli import main


def _cli(ledger, capsys, *args):
    code = main(["--store", ledger.path, *args])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_minimum_belongs_to_the_risk_plan(ledger, capsys):
    head = ledger.head()
    with pytest.raises(SystemExit) as info:
        main(["--store", ledger.path, "sample", "--plan", "random", "--size", "3", "--minimum", "7"])
    assert info.value.code == 2 and "--minimum goes with --plan risk" in capsys.readouterr().err
    assert ledger.head() == head
    code, out, _ = _cli(ledger, capsys, "sample", "--plan", "risk", "--share", "0.01", "--minimum", "7", "--json")
    body = json.loads(out)
    assert code == 0 and body["options"]["minimum"] == 7 and body["strata"]["unflagged"]["drawn"] == 7


def test_review_adjudicate_and_stats_from_the_command_line(ledger, capsys):
    _, out, _ = _cli(ledger, capsys, "sample", "--plan", "random", "--size", "40", "--json")
    draw_id = json.loads(out)["draw_id"]
    assert _cli(ledger, capsys, "review", "rv-00002", "--reader", "a", "--verdict", "agree")[0] == 0
    code, out, _ = _cli(ledger, capsys, "review", "rv-00002", "--reader", "b", "--verdict", "disagree",
                        "--label", "crack", "--draw", draw_id)
    assert code == 0 and f"for draw {draw_id}" in out
    code, out, _ = _cli(ledger, capsys, "adjudicate", "rv-00002", "--by", "lead", "--label", "crack",
                        "--reason", "seen on the film", "--json")
    assert code == 0 and json.loads(out)["label"] == "crack"
    code, out, _ = _cli(ledger, capsys, "stats", "--json")
    s = json.loads(out)
    assert s["reader_conflicts"]["adjudicated"] == ["rv-00002"]
    assert s["draws"][0]["reviewed"] == 1 and s["draws"][0]["n_of"] == "cases"
    code, out, _ = _cli(ledger, capsys, "history", "rv-00002")
    assert "adjudicated" in out and "by lead: crack" in out and f"for draw {draw_id}" in out


@pytest.mark.parametrize(("kwargs", "words"), [
    ({"plan": "random", "size": 3, "aql": 1.0}, "--aql goes with --plan lot, not --plan random"),
    ({"plan": "random"}, "--plan random needs --size N"),
    ({"plan": "lot", "aql": 1.0, "size": 5}, "leave out --size"),
    ({"plan": "stratified", "size": 4, "share": 0.2}, "--share goes with --plan risk"),
])
def test_the_python_api_refuses_options_of_another_plan_as_the_command_does(ledger, kwargs, words):
    from casefile.errors import UsageError
    from casefile.review import draw

    head = ledger.head()
    with pytest.raises(UsageError) as info:
        draw(ledger, kwargs.pop("plan"), **kwargs)
    assert words in str(info.value)
    assert ledger.head() == head
