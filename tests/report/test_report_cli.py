"""`casefile report` as a user meets it: one JSON line with --json, the PDF written whole, usage errors
exit 2, a folder that does not exist is one line and exit 1, and the ledger is never written.

Outside sources: POSIX's exit status 2 for a usage error (common practice, as argparse does) and
ISO 8601 for the dates; pypdf (reference library) reads the PDF back; the figures themselves are
checked against raw SQL and scipy in test_figures.py.
"""

from __future__ import annotations

import json

import pytest
from pypdf import PdfReader

from casefile.cli import main

from .conftest import PERIOD


def _cli(path, capsys, *args):
    code = main(["--store", path, *args])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_json_and_pdf_from_the_command_line(scenario, ledger, capsys, tmp_path):
    head = ledger.head()
    pdf = tmp_path / "october.pdf"
    code, out, err = _cli(scenario, capsys, "report", "--since", PERIOD[0], "--until", PERIOD[1], "-o", str(pdf),
                          "--json")
    assert code == 0 and err == ""
    lines = out.splitlines()
    assert len(lines) == 1
    fig = json.loads(lines[0])
    assert fig["ledger"] == {"head_seq": head[0], "head_hash": head[1]}
    assert fig["period"]["since"] == "2026-10-01T00:00:00Z" and fig["period"]["until"] == "2026-10-30T23:59:59Z"
    text = "".join(p.extract_text() for p in PdfReader(str(pdf)).pages).replace("\n", "").replace(" ", "")
    assert head[1] in text
    assert ledger.head() == head  # a report writes nothing to the ledger


def test_text_summary_names_the_head(scenario, ledger, capsys, tmp_path):
    code, out, _ = _cli(scenario, capsys, "report", "--since", PERIOD[0], "--until", PERIOD[1], "-o",
                        str(tmp_path / "r.pdf"))
    assert code == 0
    assert f"computed from ledger head seq {ledger.head()[0]} {ledger.head()[1]}" in out
    assert "report written to" in out and "KS D = " in out


@pytest.mark.parametrize("args, said", [
    (("--since", "2026-10-01", "--until", "2026-10-30"), "give -o FILE.pdf for the PDF, --json for the figures, or both"),
    (("--json", "--until", "2026-09-01"), "the following arguments are required: --since"),
    (("--json", "--since", "2026-10-05", "--until", "2026-10-01"), "is before --since"),
    (("--json", "--since", "yesterday", "--until", "2026-10-01"), "is not an ISO 8601 date"),
])
def test_usage_errors_exit_2(scenario, capsys, args, said):
    with pytest.raises(SystemExit) as info:
        main(["--store", scenario, "report", *args])
    assert info.value.code == 2
    assert said in capsys.readouterr().err


def test_a_missing_folder_is_one_line(scenario, capsys, tmp_path):
    code, out, err = _cli(scenario, capsys, "report", "--since", PERIOD[0], "--until", PERIOD[1], "-o",
                          str(tmp_path / "nowhere" / "r.pdf"))
    assert code == 1 and out == ""
    assert err.count("\n") == 1 and "nowhere/r.pdf: the folder does not exist" in err


def test_verify_names_the_head_the_report_was_computed_from(scenario, capsys):
    code, out, _ = _cli(scenario, capsys, "report", "--since", PERIOD[0], "--until", PERIOD[1], "--json")
    assert code == 0
    fig = json.loads(out)
    code, out, _ = _cli(scenario, capsys, "verify", "--json")
    checked = json.loads(out)
    assert code == 0 and checked["ok"] is True
    assert (checked["head_seq"], checked["head_hash"]) == (fig["ledger"]["head_seq"], fig["ledger"]["head_hash"])
