"""Checks a torch.export archive (.pt2) before and after torch reads it, so that loading one runs no code from it.

A ``.pt2`` archive is a graph of tensor operations and the weights as raw bytes. That is what makes it
the safer model format. But ``torch.export.load`` (torch 2.13) also unpickles some members: the sample
inputs (``data/sample_inputs/*.pt``, retried with ``weights_only=False`` when the safe load fails),
weights or constants saved "with pickle", whole pickled objects and TorchScript objects among the
constants, and the members of the older archive layout. It also loads compiled AOTInductor libraries,
and it rebuilds graph nodes from names that can reach any callable under ``torch``. A crafted archive
can run code through each of these. So, before torch opens the file:

* the archive must be the current layout (an ``archive_version`` member): the older layout is refused;
* nothing under ``data/aotinductor/`` (compiled code), no pickled constants that are not tensors
  (``custom_obj*`` or ``opaque*`` payloads);
* every other member under ``data/`` that torch would unpickle must load with
  ``torch.load(weights_only=True)``, which admits only tensors and plain containers. Raw weight payloads
  are read by torch as bytes and are not unpickled;

and after it has been read, every node of every graph must call an operator (a registered ATen or
other op, a higher-order op over sub-graphs), a symbolic-shape helper or a listed pure function of
``operator`` or ``math``; nothing else is run when the model is called.
"""

from __future__ import annotations

import io
import json
import math
import operator
import zipfile
from pathlib import Path
from typing import Any

import torch

from casefile.errors import ModelError

_CONFIG_SUFFIXES = ("_weights_config.json", "_constants_config.json")
_REFUSED_PAYLOADS = ("custom_obj", "opaque")  # TorchScript objects and plain pickles among the constants
# Pure functions a graph may call besides operators (the symbolic-shape arithmetic torch.export records).
_PURE = tuple(
    [getattr(operator, n) for n in (
        "getitem", "eq", "ne", "le", "ge", "lt", "gt", "neg", "pos", "mul", "add", "sub", "floordiv", "mod",
        "pow", "truediv", "and_", "or_", "lshift", "rshift", "not_", "abs")]
    + [getattr(torch, n) for n in ("sym_not", "sym_int", "sym_float", "sym_ite", "sym_max", "sym_min",
                                   "sym_sqrt", "sym_sum") if hasattr(torch, n)]
    + [math.trunc, math.floor, math.ceil, math.sqrt]
)


# torch stores the weights in its zip files uncompressed (TorchScript deflates only its code and debug
# members), so the declared sizes add up to little more than the file's own: 1.0x for torch.save and
# torch.export.save, 1.3x for a small TorchScript file (tests/models/test_expansion.py). A member that
# inflates far beyond its compressed size is a zip bomb, which would make torch allocate its declared
# size before reading a byte of it
MAX_EXPANSION = 20  # declared sizes over the file's size
EXPANSION_SLACK = 1 << 20  # bytes allowed beyond that, for a small file's headers and configs


def check_expansion(path: Path) -> None:
    """Refuse, before torch opens it, a zip file (every torch save format but the legacy pickle) whose
    members declare more than ``MAX_EXPANSION`` times the file's size once inflated. Not a zip: no check
    here (torch reads it as a legacy pickle, with ``weights_only``)."""
    if not zipfile.is_zipfile(path):
        return
    try:
        with zipfile.ZipFile(path) as z:
            declared = sum(i.file_size for i in z.infolist())
    except (zipfile.BadZipFile, OSError, ValueError):
        raise ModelError(f"{path.name}: not a readable model file (a damaged zip archive)") from None
    size = path.stat().st_size
    if declared > MAX_EXPANSION * size + EXPANSION_SLACK:
        raise ModelError(f"{path.name}: its members inflate to {declared:,} bytes from a {size:,}-byte file (more "
                         f"than {MAX_EXPANSION} times); refused before loading, as a zip bomb would be")


def _members(path: Path) -> tuple[zipfile.ZipFile, dict[str, str]]:
    """The archive and its members by name below the top folder torch.export.save writes (``<root>/``)."""
    try:
        z = zipfile.ZipFile(path)
        names = [n for n in z.namelist() if not n.endswith("/")]
    except (zipfile.BadZipFile, OSError, ValueError):
        raise ModelError(f"{path.name}: not a readable torch.export archive (not a zip file)") from None
    if len(set(names)) != len(names):  # zip readers differ on which copy of a repeated name they return
        z.close()
        raise ModelError(f"{path.name}: archive names one file twice; refused")
    roots = {n.split("/", 1)[0] for n in names}
    if len(roots) != 1 or any("/" not in n for n in names):
        z.close()
        raise ModelError(f"{path.name}: not a torch.export archive (its files are not in one top folder)")
    return z, {n.split("/", 1)[1]: n for n in names}


def _raw_payloads(z: zipfile.ZipFile, members: dict[str, str], name: str) -> set[str]:
    """Members the weights and constants configs name as raw tensor bytes (torch reads them unpickled)."""
    raw: set[str] = set()
    for rel, full in members.items():
        if not rel.startswith("data/") or not rel.endswith(_CONFIG_SUFFIXES):
            continue
        folder = rel.rsplit("/", 1)[0]
        try:
            config = json.loads(z.read(full)).get("config", {})
            items = [(str(v["path_name"]), bool(v.get("use_pickle"))) for v in config.values()]
        except Exception:
            raise ModelError(f"{name}: archive member {rel} is not a readable payload list") from None
        for path_name, use_pickle in items:
            if path_name.startswith(_REFUSED_PAYLOADS):
                raise ModelError(f"{name}: archive holds a pickled object ({folder}/{path_name}), not only "
                                 "tensors; casefile does not unpickle objects from a model file")
            if not use_pickle:
                raw.add(f"{folder}/{path_name}")
    return raw


def check_export_archive(path: Path) -> None:
    """Refuse a .pt2 file that torch.export.load would run code from (see the module docstring)."""
    name = path.name
    z, members = _members(path)
    with z:
        if "archive_version" not in members:
            raise ModelError(f"{name}: older torch.export archive layout (no archive_version); export the "
                             "model again with torch.export.save")
        compiled = sorted(r for r in members if r.startswith("data/aotinductor/"))
        if compiled:
            raise ModelError(f"{name}: archive holds compiled AOTInductor code ({compiled[0]}); casefile loads "
                             "only the exported graph and its weights")
        raw = _raw_payloads(z, members, name)
        for rel, full in sorted(members.items()):
            if not rel.startswith("data/") or rel.endswith(_CONFIG_SUFFIXES) or rel in raw:
                continue
            try:
                torch.load(io.BytesIO(z.read(full)), map_location="cpu", weights_only=True)
            except Exception:
                raise ModelError(f"{name}: archive member {rel} is a pickle that holds more than tensors; "
                                 "casefile does not unpickle objects from a model file") from None


def _target_name(target: Any) -> str:
    module = getattr(target, "__module__", None)
    qual = getattr(target, "__qualname__", None) or getattr(target, "__name__", None) or type(target).__name__
    return f"{module}.{qual}" if module else str(qual)


def check_export_graph(program: Any, name: str) -> None:
    """Refuse an exported program whose graphs call anything but operators and the listed pure functions."""
    op_types = (torch._ops.OpOverload, torch._ops.HigherOrderOperator)  # torch's own operator classes
    for gm in program.graph_module.modules():
        if not isinstance(gm, torch.fx.GraphModule):
            continue
        for node in gm.graph.nodes:
            if node.op in ("placeholder", "get_attr", "output"):
                continue
            target = node.target
            if node.op == "call_function" and (isinstance(target, op_types) or any(target is f for f in _PURE)):
                continue
            raise ModelError(f"{name}: exported graph node {node.name!r} calls {_target_name(target)} "
                             f"({node.op}), which is not an operator; casefile refuses to run it")
