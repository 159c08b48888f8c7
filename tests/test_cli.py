"""The command line as a user meets it: usage errors exit 2 naming the flag and write nothing, failures are
one line on stderr, a closed output pipe is not a traceback.

Outside sources: POSIX utility conventions for exit status 2 on a usage error (common practice, as
argparse does), ISO 8601 for the date and time forms accepted by --since/--until.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from casefile.cli import build_parser
from casefile.cli.case_cmds import METHOD_NAMES, OCCLUSION_MODES
from casefile.cli.common import since_time, until_time
from casefile.explain import METHODS
from casefile.explain.occlusion import MODES
from casefile.ledger import Ledger

ROOT = Path(__file__).resolve().parents[1]


def run(*args: str, store: Path | None = None, env: dict | None = None) -> subprocess.CompletedProcess:
    pre = ["--store", str(store)] if store else []
    return subprocess.run([sys.executable, "-m", "casefile.cli", *pre, *args], capture_output=True, text=True,
                          cwd=ROOT, env=env)


@pytest.fixture()
def store(tmp_path):
    path = tmp_path / "l.db"
    led = Ledger(str(path))
    led.append("failed", {"attempted_at": "2026-11-01T00:00:00Z", "file_name": "x.png", "reason": "test"})
    led.close()
    return path


def head(path: Path) -> int:
    led = Ledger(str(path), create=False)
    try:
        return led.head()[0]
    finally:
        led.close()


def test_method_names_are_the_explain_rooms():
    assert tuple(METHOD_NAMES) == tuple(METHODS)
    assert OCCLUSION_MODES == MODES


@pytest.mark.parametrize("args, flag", [
    (["sample", "--plan", "random"], "--size"),
    (["sample", "--plan", "stratified"], "--size"),
    (["sample", "--plan", "lot"], "--aql"),
    (["sample", "--plan", "risk"], "--share"),
    (["sample", "--plan", "random", "--size", "0"], "--size"),
    (["sample", "--plan", "risk", "--share", "1.5"], "--share"),
    (["audit", "--since", "last tuesday"], "--since"),
    (["audit", "--until", "2026-13-01"], "--until"),
    (["audit", "--json", "--csv"], "--csv"),
    (["verify", "--unsigned-ok"], "--seal"),
    (["explain", "--model", "m.pt", "--card", "c.json", "--methods", "gradcam,occlussion", "x.png"], "--methods"),
    (["explain", "--model", "m.pt", "--card", "c.json", "--patch", "0", "x.png"], "--patch"),
    (["explain", "--model", "m.pt", "--card", "c.json", "--stride", "1.5", "x.png"], "--stride"),
    (["export", "cf-00000000", "--pacs", "localhost"], "--pacs"),
])
def test_usage_errors_exit_2_name_the_flag_and_write_nothing(store, args, flag):
    before = head(store)
    done = run(*args, store=store)
    assert done.returncode == 2, done.stderr
    assert flag in done.stderr and "Traceback" not in done.stderr
    assert head(store) == before


def test_closed_output_pipe_is_one_line_not_a_traceback(store):
    led = Ledger(str(store))
    for i in range(3000):  # more than a pipe buffer of JSON lines
        led.append("failed", {"attempted_at": "2026-11-01T00:00:00Z", "file_name": f"f{i}.png", "reason": "r" * 40})
    led.close()
    cmd = f"{sys.executable} -m casefile.cli --store {store} audit --kind failed --json | head -1"
    done = subprocess.run(["bash", "-o", "pipefail", "-c", cmd], capture_output=True, text=True, cwd=ROOT)
    assert done.stdout.count("\n") == 1
    assert done.returncode == 1
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and "output was closed" in lines[0], done.stderr


def test_a_store_that_is_not_a_ledger_is_one_line(tmp_path):
    notes = tmp_path / "notes.txt"
    notes.write_text("shopping list\n")
    done = run("audit", store=notes)
    assert done.returncode == 1
    assert len(done.stderr.strip().splitlines()) == 1 and "notes.txt" in done.stderr
    assert notes.read_text() == "shopping list\n"  # untouched


def test_debug_shows_the_traceback(tmp_path):
    notes = tmp_path / "notes.txt"
    notes.write_text("shopping list\n")
    plain = run("audit", store=notes)
    assert "Traceback" not in plain.stderr
    loud = run("--debug", "audit", store=notes)
    assert loud.returncode == 1 and "Traceback (most recent call last)" in loud.stderr
    env = {**os.environ, "CASEFILE_DEBUG": "1"}
    assert "Traceback (most recent call last)" in run("audit", store=notes, env=env).stderr


@pytest.mark.parametrize("text, since, until", [
    ("2026-11-01", "2026-11-01T00:00:00Z", "2026-11-01T23:59:59Z"),
    ("2026-11-01T08:30:00Z", "2026-11-01T08:30:00Z", "2026-11-01T08:30:00Z"),
    ("2026-11-01T09:30:00+01:00", "2026-11-01T08:30:00Z", "2026-11-01T08:30:00Z"),  # ISO 8601 offset
    ("2026-11-01T08:30", "2026-11-01T08:30:00Z", "2026-11-01T08:30:00Z"),
])
def test_times_are_read_as_iso_8601_and_kept_in_utc(text, since, until):
    assert since_time(text) == since and until_time(text) == until


def test_every_command_has_help_that_names_itself():
    parser = build_parser()
    sub = next(a for a in parser._actions if a.dest == "command")
    for name, sp in sub.choices.items():
        assert sp.description, name
        assert f"casefile {name}" in sp.format_usage()


def _case_store(tmp_path, ids):
    from tests.ledger.bodies import case_body

    path = tmp_path / "cases.db"
    led = Ledger(str(path))
    for i, cid in enumerate(ids):
        body = case_body(i)
        body["case_id"] = cid
        led.append("case", body)
    led.close()
    return path


def test_commands_take_a_unique_case_id_prefix_and_say_when_it_is_ambiguous(tmp_path):
    store = _case_store(tmp_path, ["cf-1a2b3c4d5e6f7a8b", "cf-1a2b3c4d9999aaaa", "cf-77777777aaaaaaaa"])
    shown = run("history", "cf-77777777", "--json", store=store)
    assert shown.returncode == 0 and '"seq": 3' in shown.stdout, shown.stderr  # the third case, by its prefix
    before = head(store)
    for args in (["history", "cf-1a2b3c4d"], ["review", "cf-1a2b3c4d", "--reader", "r1", "--verdict", "agree"],
                 ["amend", "cf-1a2b3c4d", "--author", "qa", "--reason", "typo"]):
        done = run(*args, store=store)
        assert done.returncode == 1 and done.stderr.count("\n") == 1, done.stderr
        assert "ambiguous" in done.stderr and "cf-1a2b3c4d5e6f7a8b" in done.stderr
    short = run("sheet", "cf-7777", store=store)
    assert short.returncode == 1 and "at least 8 characters" in short.stderr
    assert head(store) == before  # nothing was written by any of them


def test_store_help_names_exactly_the_forms_the_ledger_opens(tmp_path):
    from casefile.cli.common import STORE_HELP

    assert "sqlite:///relative/path.db" in STORE_HELP and "sqlite:////absolute/path.db" in STORE_HELP
    assert "SQLAlchemy" not in STORE_HELP  # other engines' URLs are refused, so the help does not offer them
    env = {**os.environ, "PYTHONPATH": str(ROOT)}

    def init(form: str) -> subprocess.CompletedProcess:
        return subprocess.run([sys.executable, "-m", "casefile.cli", "--store", form, "init"], capture_output=True,
                              text=True, cwd=tmp_path, env=env)

    for form in ("a.db", "sqlite:///b.db", f"sqlite:///{tmp_path}/c.db"):
        assert init(form).returncode == 0, init(form).stderr
    assert {p.name for p in tmp_path.glob("*.db")} == {"a.db", "b.db", "c.db"}
    refused = init("postgresql://db.example/ledger")  # the driver must be named
    assert refused.returncode == 1 and "postgresql+psycopg://USER" in refused.stderr
    assert "postgresql+psycopg://" in STORE_HELP


def test_card_pin_refusal_changes_neither_the_card_nor_the_ledger(tmp_path, store):
    card = tmp_path / "card.json"
    card.write_text('{"name": "x"}\n')
    before = head(store)
    done = run("card", "pin", str(card), str(tmp_path / "missing.pt"), store=store)
    assert done.returncode == 1 and done.stderr.count("\n") == 1 and "card.json" in done.stderr
    assert card.read_text() == '{"name": "x"}\n' and head(store) == before
