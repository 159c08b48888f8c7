"""A model card cannot run code: entry points load only when something outside the card trusts them.

The hostile cards here are the ones an attacker with write access to a card folder would write. Each
check is that a marker file the attack would create does not appear, and that the refusal is one line.
The rules are casefile's own (casefile/models/trust.py, casefile/site.py); Python's own definitions
decide what a "Python function or class" is (the inspect module).

Outside sources: no outside source applies to the trust rules themselves (casefile's own); Python's
inspect module is the reference for what counts as a function or class.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest
import torch

from casefile.errors import ModelError
from casefile.models import check_card, load_model
from demo_cases.nets import tiny_net
from tests.models.conftest import TRUSTED, card_dict, write_card

ROOT = Path(__file__).resolve().parents[2]


def _refusal(model, card, **kw) -> str:
    with pytest.raises(ModelError) as err:
        load_model(model, card, **kw)
    message = str(err.value)
    assert "\n" not in message, message
    return message


def test_hostile_card_runs_nothing(tiny, tmp_path):
    marker = tmp_path / "MARKER"
    card = write_card(tmp_path / "hostile.json", entry_point="subprocess:getoutput",
                      entry_point_args={"cmd": f"touch {marker}"}, weights=str(tiny["weights"]))
    # both forms: the card's entry point with a state-dict file, and the entry point given as the model
    for model in (tiny["weights"], "subprocess:getoutput"):
        message = _refusal(model, card)
        assert message.startswith("hostile.json: entry point subprocess:getoutput is not trusted")
        assert "trusted_entry_points" in message and "$CASEFILE_TRUSTED_ENTRY_POINTS" in message
        assert not marker.exists()


@pytest.mark.parametrize("entry_point", ["os:system", "builtins:eval", "demo_cases.nets:tiny_net"])
def test_nothing_is_trusted_by_default(tiny, tmp_path, entry_point):
    card = write_card(tmp_path / "c.json", entry_point=entry_point, weights=str(tiny["weights"]))
    assert "is not trusted at this site" in _refusal(tiny["weights"], card)


def test_hostile_card_through_the_command_line(tiny, tmp_path):
    marker = tmp_path / "MARKER"
    card = write_card(tmp_path / "hostile.json", entry_point="subprocess:getoutput",
                      entry_point_args={"cmd": f"touch {marker}"}, weights=str(tiny["weights"]))
    picture = tmp_path / "p.png"
    picture.write_bytes(b"")  # never reached: the model is refused first
    env = {k: v for k, v in os.environ.items() if k != "CASEFILE_TRUSTED_ENTRY_POINTS"}
    env["CASEFILE_CONFIG_DIR"] = str(tmp_path / "config")
    done = subprocess.run([sys.executable, "-m", "casefile.cli", "--store", str(tmp_path / "l.db"), "explain",
                           "--model", str(tiny["weights"]), "--card", str(card), "-q", str(picture)],
                          capture_output=True, text=True, cwd=ROOT, env=env, timeout=300)
    assert done.returncode == 1
    assert done.stderr.count("\n") == 1 and "subprocess:getoutput is not trusted" in done.stderr
    assert not marker.exists() and not (tmp_path / "l.db").exists()  # refused before the ledger is opened


def test_trusted_entry_point_loads_from_each_source(tiny, monkeypatch, _own_site_settings):
    x = torch.rand(1, 1, 32, 32, generator=torch.Generator().manual_seed(1))
    ref = load_model(tiny["pt2"], tiny["card"]).module(x)
    # 1. the calling program vouches for its own factory
    by_arg = load_model(tiny["weights"], tiny["card"], trusted_entry_points=TRUSTED)
    # 2. the environment names the package
    monkeypatch.setenv("CASEFILE_TRUSTED_ENTRY_POINTS", "demo_cases")
    by_env = load_model("demo_cases.nets:tiny_net", tiny["card"])
    monkeypatch.delenv("CASEFILE_TRUSTED_ENTRY_POINTS")
    # 3. the site file names the module
    _own_site_settings.mkdir()
    (_own_site_settings / "site.json").write_text(json.dumps({"trusted_entry_points": ["demo_cases.nets"]}))
    by_file = load_model(tiny["weights"], tiny["card"])
    for m in (by_arg, by_env, by_file):
        with torch.no_grad():
            assert torch.allclose(m.module(x), ref, atol=1e-5)  # same weights as the exported archive
        assert m.source == {"format": "entry-point", "entry_point": "demo_cases.nets:tiny_net",
                            "file_name": "tiny.pt"}


def test_trusting_one_factory_does_not_trust_its_neighbours(tiny, tmp_path):
    card = write_card(tmp_path / "cls.json", entry_point="demo_cases.nets:TinyNet")
    assert "not trusted" in _refusal(tiny["weights"], card, trusted_entry_points=TRUSTED)
    # an nn.Module class is a valid factory once trusted
    m = load_model(tiny["weights"], card, trusted_entry_points=["demo_cases.nets:TinyNet"])
    assert type(m.module).__name__ == "TinyNet"


@pytest.fixture
def odd_module(tmp_path, monkeypatch) -> str:
    """A module a careless site might trust: it imports helpers and holds callables that are not factories."""
    marker = tmp_path / "RAN"
    (tmp_path / "oddnets.py").write_text(textwrap.dedent(f"""
        import functools
        from subprocess import getoutput

        MARKER = {str(marker)!r}

        def _touch(**_kw):
            open(MARKER, "w").close()

        class Maker:
            def __call__(self, **kw):
                _touch()

        class NotAModule:
            def __init__(self, **kw):
                _touch()

        def returns_text(**kw):
            return "not a module"

        maker = Maker()
        part = functools.partial(_touch)
        runner = eval
    """))
    monkeypatch.syspath_prepend(str(tmp_path))
    return str(marker)


@pytest.mark.parametrize(("attr", "expected"), [
    ("getoutput", "is defined in subprocess, which is not trusted"),
    ("maker", "is a Maker, not a function or nn.Module class"),
    ("part", "is a partial, not a function or nn.Module class"),
    ("runner", "is a builtin_function_or_method, not a function"),
    ("NotAModule", "is a class that is not a torch.nn.Module"),
    ("returns_text", "returned str, not a module"),
])
def test_a_trusted_module_still_yields_only_factories(tiny, tmp_path, odd_module, attr, expected):
    card = write_card(tmp_path / "odd.json", entry_point=f"oddnets:{attr}", weights=str(tiny["weights"]),
                      entry_point_args={"cmd": f"touch {odd_module}"})
    assert expected in _refusal(tiny["weights"], card, trusted_entry_points=["oddnets"])
    assert not Path(odd_module).exists()


@pytest.mark.parametrize(("args", "field"), [
    ({"width": [2]}, "entry_point_args.width"),
    ({"width": None}, "entry_point_args.width"),
    ({"width": {"value": 2}}, "entry_point_args.width"),
    ({"not-a-name": 2}, "entry_point_args"),
    ({"2width": 2}, "entry_point_args"),
])
def test_card_check_refuses_arguments_that_are_not_plain_values(args, field):
    with pytest.raises(ModelError, match=rf"^card: field {field}\b"):
        check_card(card_dict(entry_point_args=args))


def test_python_keyword_as_argument_name_is_refused(tiny, tmp_path):
    card = write_card(tmp_path / "kw.json", entry_point_args={"width": 2, "class": 1})
    assert "'class' is not a Python identifier" in _refusal(tiny["weights"], card, trusted_entry_points=TRUSTED)


def test_arguments_reach_the_factory_as_keywords(tiny, tmp_path):
    torch.manual_seed(0)
    torch.save(tiny_net(width=3, n_classes=2).state_dict(), tmp_path / "w3.pt")
    card = write_card(tmp_path / "w3.json", labels=["a", "b"], weights="w3.pt",
                      entry_point_args={"width": 3, "n_classes": 2})
    m = load_model(tmp_path / "w3.pt", card, trusted_entry_points=TRUSTED)
    assert m.module.head.out_features == 2 and m.module.head.in_features == 12  # 4 * width
