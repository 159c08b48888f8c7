"""A .pt2 archive runs no code from the file: crafted archives are refused before torch unpickles anything.

Each crafted archive starts from a real torch.export.save archive and changes one member the way an
attacker could. Where torch 2.13 would run the planted pickle (a ``__reduce__`` that creates a marker
file), the test checks that the marker does not appear. Archive layout: torch.export.pt2_archive
(member names read from a real archive written by torch.export.save in the fixture).

Outside sources: torch's own archive format (torch.export.save / torch.export.pt2_archive, read
from a real archive) and Python's pickle protocol (the opcodes a crafted member uses).
"""

from __future__ import annotations

import io
import json
import os
import zipfile
from pathlib import Path

import pytest
import torch

from casefile.errors import ModelError
from casefile.models import load_model
from casefile.models.archive import check_export_graph


class _Planted:
    """Unpickling this creates a marker file: it stands for any code a pickle can run."""

    def __init__(self, marker: Path) -> None:
        self.marker = str(marker)

    def __reduce__(self):
        return (os.system, (f"touch {self.marker}",))


def _pickled(marker: Path) -> bytes:
    buf = io.BytesIO()
    torch.save(_Planted(marker), buf)
    return buf.getvalue()


def _rewrite(src: Path, dst: Path, change, add: dict[str, bytes] | None = None) -> Path:
    """Copy an archive member by member; ``change(rel_name, data)`` returns the new bytes (or None to drop)."""
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(dst, "w") as zout:
        root = zin.namelist()[0].split("/", 1)[0]
        for info in zin.infolist():
            rel = info.filename.split("/", 1)[1]
            data = change(rel, zin.read(info.filename))
            if data is not None:
                zout.writestr(info.filename, data)
        for rel, data in (add or {}).items():
            zout.writestr(f"{root}/{rel}", data)
    return dst


def _refused(path: Path, card: Path) -> str:
    with pytest.raises(ModelError) as err:
        load_model(path, card)
    assert "\n" not in str(err.value) and str(err.value).startswith(f"{path.name}: ")
    return str(err.value)


def test_planted_sample_inputs_pickle_is_refused(tiny, tmp_path):
    marker = tmp_path / "MARKER"
    evil = _rewrite(tiny["pt2"], tmp_path / "inputs.pt2",
                    lambda rel, data: _pickled(marker) if rel.startswith("data/sample_inputs/") else data)
    assert "data/sample_inputs/model.pt is a pickle that holds more than tensors" in _refused(evil, tiny["card"])
    assert not marker.exists()


def test_weight_saved_with_pickle_must_be_a_tensor(tiny, tmp_path):
    marker = tmp_path / "MARKER"

    def change(rel, data):
        if rel == "data/weights/model_weights_config.json":
            config = json.loads(data)
            first = next(iter(config["config"].values()))
            first["use_pickle"] = True
            return json.dumps(config).encode()
        return _pickled(marker) if rel == "data/weights/weight_0" else data

    evil = _rewrite(tiny["pt2"], tmp_path / "weights.pt2", change)
    assert "data/weights/weight_0 is a pickle" in _refused(evil, tiny["card"])
    assert not marker.exists()


def test_pickled_object_constant_is_refused(tiny, tmp_path):
    def change(rel, data):
        if rel == "data/constants/model_constants_config.json":
            return json.dumps({"config": {"obj": {"path_name": "opaque_obj_0", "is_param": False,
                                                  "use_pickle": True}}}).encode()
        return data

    evil = _rewrite(tiny["pt2"], tmp_path / "const.pt2", change,
                    add={"data/constants/opaque_obj_0": _pickled(tmp_path / "MARKER")})
    assert "archive holds a pickled object (data/constants/opaque_obj_0)" in _refused(evil, tiny["card"])
    assert not (tmp_path / "MARKER").exists()


def test_compiled_code_and_old_layouts_are_refused(tiny, tmp_path):
    so = _rewrite(tiny["pt2"], tmp_path / "aoti.pt2", lambda rel, data: data,
                  add={"data/aotinductor/model/model.so": b"\x7fELF"})
    assert "compiled AOTInductor code" in _refused(so, tiny["card"])
    old = _rewrite(tiny["pt2"], tmp_path / "old.pt2", lambda rel, data: None if rel == "archive_version" else data)
    assert "older torch.export archive layout" in _refused(old, tiny["card"])


def test_a_name_given_twice_is_refused(tiny, tmp_path):
    twice = _rewrite(tiny["pt2"], tmp_path / "twice.pt2", lambda rel, data: data)
    with zipfile.ZipFile(twice, "a") as z, pytest.warns(UserWarning, match="Duplicate name"):
        z.writestr(z.namelist()[0], b"again")
    assert "names one file twice" in _refused(twice, tiny["card"])


def test_graph_calling_a_plain_function_is_refused():
    # an FX graph (torch.fx documentation: Graph.call_function) that calls os.getcwd on forward
    graph = torch.fx.Graph()
    x = graph.placeholder("x")
    graph.call_function(os.getcwd, ())
    graph.output(x)

    class _Program:
        graph_module = torch.fx.GraphModule(torch.nn.Module(), graph)

    with pytest.raises(ModelError, match=r"^m.pt2: exported graph node 'getcwd' calls .*getcwd \(call_function\)"):
        check_export_graph(_Program(), "m.pt2")


def test_a_real_archive_passes_and_every_node_is_an_operator(tiny):
    program = torch.export.load(str(tiny["pt2"]))
    check_export_graph(program, "tiny.pt2")  # raises on any node that is not an operator
    calls = [n for n in program.graph.nodes if n.op == "call_function"]
    assert calls and all(isinstance(n.target, torch._ops.OpOverload) for n in calls)
    assert load_model(tiny["pt2"], tiny["card"]).source["format"] == "torch.export"
