"""Replaying recorded cases: the same input and model reproduce, a changed file is refused before any
computation, a perturbed model does not reproduce and says which fields differ, the entry verifies.

Outside sources: Spearman's rank correlation as computed by ``scipy.stats.spearmanr`` (reference
library) checks the stored map comparison; SHA-256 digests come from Python's hashlib (FIPS 180-4);
torch's own ops compute the maps. No outside source decides the tolerances, which are the project's
(casefile.tolerances says why).
"""

from __future__ import annotations

import hashlib
import shutil

import numpy as np
import pytest
import torch
from scipy import stats

from casefile.errors import InputError, ModelError
from casefile.ledger import Ledger
from casefile.models import load_model
from casefile.pipeline import RunSettings, explain_batch
from casefile.replay import compare_map, latest_replay, replay_all, replay_case, replay_loaded
from casefile.tolerances import Tolerances
from demo_cases.train import ENTRY_POINT

TRUSTED = (ENTRY_POINT,)


@pytest.fixture(scope="module")
def recorded_db(tiny, tmp_path_factory):
    """A ledger holding the tiny model's cases of the two tiny inputs."""
    path = tmp_path_factory.mktemp("replay") / "recorded.db"
    with Ledger(str(path)) as led:
        loaded = load_model(str(tiny["weights"]), str(tiny["card"]), trusted_entry_points=TRUSTED)
        summary = explain_batch(led, [tiny["inputs"]], loaded, RunSettings(patch=8, stride=4), progress=False)
        assert summary.recorded == 2
    return path


@pytest.fixture()
def ledger(recorded_db, tmp_path):
    """A fresh copy of the recorded ledger for each test (replays append to it)."""
    path = tmp_path / "ledger.db"
    shutil.copy(recorded_db, path)
    led = Ledger(str(path))
    yield led
    led.close()


def _cases(ledger):
    return [(r["case_id"], r["file_name"]) for r in ledger.cases()]


def test_every_recorded_case_reproduces_and_the_entry_verifies(ledger, tiny):
    for case_id, name in _cases(ledger):
        r = replay_case(ledger, case_id, tiny["weights"], tiny["card"], tiny["inputs"] / name,
                        trusted_entry_points=TRUSTED)
        assert r.reproduces, r.differences
        b = r.entry.body
        case = ledger.case(case_id).entry
        assert b["case_seq"] == case.seq and b["case_hash"] == case.hash
        assert b["label"]["equal"] and b["confidence"]["within"]
        assert {m["method"] for m in b["maps"]} == {"gradcam", "occlusion", "gradient"}
        assert all(m["spearman"] >= 0.999 for m in b["maps"])
        assert all(c["equal"] for c in b["checks"]) and len(b["checks"]) >= 5
        assert b["software"]["torch"] == torch.__version__ and "torch_threads" in b["recorded_software"]
        assert latest_replay(ledger, case_id).seq == r.entry.seq
    report = ledger.verify()
    assert report.ok, report.problem
    assert [row["reproduces"] for row in ledger.rows("replays")] == [1, 1]


def test_a_changed_input_is_refused_before_anything(ledger, tiny, tmp_path):
    case_id, name = _cases(ledger)[0]
    other = tmp_path / name
    data = bytearray((tiny["inputs"] / name).read_bytes())
    data[-20] ^= 0x01  # one bit flipped
    other.write_bytes(bytes(data))
    head = ledger.head()
    with pytest.raises(InputError) as info:
        replay_case(ledger, case_id, tiny["weights"], tiny["card"], other, trusted_entry_points=TRUSTED)
    line = str(info.value)
    assert "\n" not in line and line.startswith(f"{name}: input differs from case {case_id}")
    assert hashlib.sha256(bytes(data)).hexdigest() in line  # both digests shown (hashlib, FIPS 180-4)
    assert ledger.case(case_id).entry.body["input"]["file_sha256"] in line
    assert ledger.head() == head


def test_a_changed_model_file_is_refused_before_torch_reads_it(ledger, tiny, tmp_path, monkeypatch):
    case_id, name = _cases(ledger)[0]
    state = torch.load(tiny["weights"], weights_only=True)
    key = next(iter(state))
    state[key] = state[key].clone()
    state[key].view(-1)[0] += 0.5
    changed = tmp_path / "tiny.pt"
    torch.save(state, changed)
    card = tmp_path / "card.json"
    card.write_text(tiny["card"].read_text())
    import casefile.models as models

    def no_load(*a, **k):  # the refusal must come before any model is loaded
        raise AssertionError("the model was loaded before the digests were checked")

    monkeypatch.setattr(models, "load_model", no_load)
    head = ledger.head()
    with pytest.raises(ModelError) as info:
        replay_case(ledger, case_id, changed, card, tiny["inputs"] / name, trusted_entry_points=TRUSTED)
    line = str(info.value)
    assert line.startswith(f"tiny.pt: model differs from case {case_id}")
    assert hashlib.sha256(changed.read_bytes()).hexdigest() in line
    assert ledger.case(case_id).entry.body["model"]["digest"] in line
    assert ledger.head() == head


def test_a_perturbed_model_does_not_reproduce_and_names_the_fields(ledger, tiny):
    """The weights file matches the record, but one weight is changed in memory after loading (as a faulty
    runtime or a tampered process would): the replay must say which fields moved."""
    case_id, name = _cases(ledger)[0]
    entry = ledger.case(case_id).entry
    loaded = load_model(tiny["weights"], tiny["card"], trusted_entry_points=TRUSTED)
    with torch.no_grad():
        last = [p for p in loaded.module.parameters() if p.dim() >= 2][-1]
        last.view(-1)[0] += 3.0  # one weight of the last layer
    digest = entry.body["input"]["file_sha256"]
    r = replay_loaded(ledger, entry, loaded, tiny["inputs"] / name, Tolerances(), digest)
    assert not r.reproduces
    said = " ".join(r.differences)
    assert "confidence: recorded" in said
    assert any(d.startswith("map ") for d in r.differences)
    assert r.entry.body["confidence"]["within"] is False
    assert r.lines()[0] == f"{case_id}: does not reproduce (replay recorded as seq {r.entry.seq})"
    assert ledger.verify().ok
    assert ledger.rows("replays")[-1]["reproduces"] == 0


def test_map_comparison_against_scipy_spearman():
    rng = np.random.default_rng(3)
    a = rng.random((16, 16)).astype(np.float32)
    b = a + rng.normal(0, 0.05, a.shape).astype(np.float32)
    got = compare_map("gradcam", a, b, Tolerances())
    ref = stats.spearmanr(a.ravel(), b.ravel()).statistic  # reference: scipy
    assert got["spearman"] == pytest.approx(ref, abs=1e-12)
    assert got["max_abs_diff"] == pytest.approx(float(np.max(np.abs(a.astype(np.float64) - b))), abs=1e-12)
    assert got["within"] is False
    same = compare_map("gradcam", a, a.copy(), Tolerances())
    assert same["within"] and same["spearman"] == 1.0 and same["max_abs_diff"] == 0.0
    wrong = compare_map("gradcam", a, a[:8], Tolerances())
    assert not wrong["within"] and "shape" in wrong["note"]


def test_replay_all_over_a_folder(ledger, tiny, tmp_path):
    folder = tmp_path / "some"
    folder.mkdir()
    names = sorted(n for _, n in _cases(ledger))
    (folder / "renamed.png").write_bytes((tiny["inputs"] / names[0]).read_bytes())  # found by digest, not name
    batch = replay_all(ledger, folder, tiny["weights"], tiny["card"], trusted_entry_points=TRUSTED)
    assert len(batch.replays) == 1 and batch.replays[0].reproduces
    assert len(batch.missing) == 1
    with pytest.raises(InputError):
        replay_all(ledger, tmp_path / "nowhere", tiny["weights"], tiny["card"], trusted_entry_points=TRUSTED)


def _main(ledger, capsys, monkeypatch, *args):
    from casefile.cli import main

    monkeypatch.setenv("CASEFILE_TRUSTED_ENTRY_POINTS", ENTRY_POINT)
    code = main(["--store", ledger.path, *args])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_replay_from_the_command_line(ledger, tiny, capsys, monkeypatch):
    import json

    case_id, name = _cases(ledger)[0]
    code, out, err = _main(ledger, capsys, monkeypatch, "replay", case_id[:11], "--model", str(tiny["weights"]),
                           "--card", str(tiny["card"]), str(tiny["inputs"] / name), "--json")
    assert code == 0, err
    lines = out.splitlines()
    assert len(lines) == 1
    body = json.loads(lines[0])
    assert body["case_id"] == case_id and body["reproduces"] is True and body["seq"] == ledger.head()[0]
    code, out, _ = _main(ledger, capsys, monkeypatch, "replay", case_id, "--model", str(tiny["weights"]),
                         "--card", str(tiny["card"]), str(tiny["inputs"] / name))
    assert code == 0 and out.startswith(f"{case_id}: reproduces (replay recorded as seq ")


@pytest.mark.parametrize("args, said", [
    (("--since", "2026-01-01"), "--since and --until go with --all"),
    (("--confidence-tolerance", "-1"), "must be a finite number of at least 0"),
    (("--map-rho", "2"), "must lie between 0 and 1"),
])
def test_replay_usage_errors_exit_2_and_write_nothing(ledger, tiny, capsys, monkeypatch, args, said):
    case_id, name = _cases(ledger)[0]
    head = ledger.head()
    with pytest.raises(SystemExit) as info:
        _main(ledger, capsys, monkeypatch, "replay", case_id, "--model", str(tiny["weights"]), "--card",
              str(tiny["card"]), str(tiny["inputs"] / name), *args)
    assert info.value.code == 2 and said in capsys.readouterr().err
    assert ledger.head() == head
