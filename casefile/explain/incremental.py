"""Occlusion logits computed incrementally: each covered image is a small change to one cached run.

The model is traced with ``torch.fx``. The unoccluded image is run once and every node's value kept.
For a batch of patch positions each node then holds, per position, only the window of its output that
the patch can reach (its projective field, see ``fields``), spliced over the cached value when a later
node needs more. Supported with windows: ``Conv2d`` (any kernel, stride, zero padding, dilation,
groups), ``MaxPool2d``, ``AvgPool2d`` (count_include_pad or no padding), BatchNorm and other per-element
layers, residual additions and channel concatenation. At the depth where a window covers most of its
map, and for every other kind of node (global pooling, flatten, linear, anything unknown), the full
maps of the batch are built and the rest of the model runs as usual, so the result is the same as one
forward per position up to float rounding. A model that cannot be traced is reported to the caller,
which then uses the plain batched method.

With ``truncate`` below 1, each window is cut to that share of its map about its centre (projective-
field truncation): faster, and approximate, because changes outside the cut are dropped.
"""

from __future__ import annotations

import operator
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from functools import reduce
from typing import Any

import torch
import torch.nn.functional as F
from torch import fx, nn

from casefile.errors import one_line

from .fields import Window, place, truncate, union

FULL_SHARE = 0.9  # a window covering this share of its map switches to full maps (see benchmarks/occlusion.py)

POINTWISE_MODULES = (
    nn.ReLU, nn.ReLU6, nn.LeakyReLU, nn.ELU, nn.GELU, nn.SiLU, nn.Sigmoid, nn.Tanh, nn.Hardswish,
    nn.Hardsigmoid, nn.Mish, nn.Identity, nn.Dropout, nn.Dropout2d, nn.BatchNorm2d,
)
POINTWISE_FUNCTIONS = {
    torch.relu, F.relu, F.relu6, F.leaky_relu, F.gelu, F.silu, F.elu, F.hardswish, torch.sigmoid, torch.tanh,
    F.sigmoid, F.tanh,
}
POINTWISE_METHODS = {"relu", "sigmoid", "tanh", "contiguous"}
_ATEN = torch.ops.aten
POINTWISE_FUNCTIONS |= {  # the same, as operators in a torch.export graph
    _ATEN.relu.default, _ATEN.sigmoid.default, _ATEN.tanh.default, _ATEN.hardtanh.default, _ATEN.leaky_relu.default,
    _ATEN.gelu.default, _ATEN.silu.default, _ATEN.elu.default, _ATEN.hardswish.default, _ATEN.hardsigmoid.default,
    _ATEN.clone.default,
}
ADD = {operator.add, operator.iadd, torch.add, _ATEN.add.Tensor}
CAT = {torch.cat, _ATEN.cat.default}


class NotTraceable(Exception):
    """The model could not be traced; the message says why."""


@dataclass
class Patched:
    """A node's per-position value, equal to ``base`` except inside each position's region.

    ``regions[i]`` is ((r0, r1), (c0, c1)), the rows and columns that can differ for position ``i``;
    ``data[i]`` holds the value on the window ``size`` starting at ``starts[i]``, which contains the region.
    """

    base: torch.Tensor  # [1, C, H, W]
    regions: list[tuple[tuple[int, int], tuple[int, int]]]
    starts: list[tuple[int, int]]
    size: tuple[int, int]
    data: torch.Tensor  # [B, C, wh, ww]


@dataclass
class Full:
    """A node's value for every position of the batch, in full."""

    value: Any


@dataclass
class Plan:
    """What a traced model offers: its graph, the cached value of every node, and notes."""

    graph: fx.GraphModule
    base: dict[str, Any]
    depends: set[str]
    notes: list[str] = field(default_factory=list)
    macs_full: int = 0


def _inlined(module: nn.Module) -> fx.GraphModule | None:
    """One flat graph for a module that carries its own graphs (``torch.export.unflatten``'s modules:
    a graph per submodule, each holding operators), with every submodule's graph inlined; None for any
    other module."""
    if not isinstance(getattr(module, "graph", None), fx.Graph):
        return None
    flat = fx.Graph()

    def copy(graph: fx.Graph, prefix: str, inputs: list[Any]) -> Any:
        env: dict[fx.Node, Any] = {}
        feed = iter(inputs)
        for n in graph.nodes:
            if n.op == "placeholder":
                env[n] = next(feed)
            elif n.op == "output":
                return fx.node.map_arg(n.args[0], lambda a: env[a])
            elif n.op == "call_module":
                sub = module.get_submodule(prefix + str(n.target))
                args = fx.node.map_arg(n.args, lambda a: env[a])
                if isinstance(getattr(sub, "graph", None), fx.Graph) and not n.kwargs:
                    env[n] = copy(sub.graph, prefix + str(n.target) + ".", list(args))
                else:
                    env[n] = flat.call_module(prefix + str(n.target), args, fx.node.map_arg(n.kwargs, lambda a: env[a]))
            elif n.op == "get_attr":
                env[n] = flat.get_attr(prefix + str(n.target))
            else:
                env[n] = flat.node_copy(n, lambda a: env[a])
        return None

    outer = [flat.placeholder(n.name) for n in module.graph.nodes if n.op == "placeholder"]
    flat.output(copy(module.graph, "", outer))
    return fx.GraphModule(module, flat)


def trace(module: nn.Module, x: torch.Tensor) -> Plan:
    """Trace ``module`` and run ``x`` once, keeping every node's value; NotTraceable when tracing fails."""
    try:
        gm = module if isinstance(module, fx.GraphModule) else (_inlined(module) or fx.symbolic_trace(module))
    except Exception as exc:  # any tracing failure means the plain method, with the reason recorded
        raise NotTraceable(f"{type(exc).__name__}: {one_line(exc)}") from None
    base: dict[str, Any] = {}
    depends: set[str] = set()

    class Keep(fx.Interpreter):
        def run_node(self, n: fx.Node) -> Any:
            out = super().run_node(n)
            base[n.name] = out.clone() if isinstance(out, torch.Tensor) else out
            return out

    with torch.no_grad():
        Keep(gm).run(x)
    for n in gm.graph.nodes:
        if n.op == "placeholder" or any(a.name in depends for a in n.all_input_nodes):
            depends.add(n.name)
    plan = Plan(gm, base, depends)
    plan.macs_full = sum(macs(gm, n, base) for n in gm.graph.nodes)
    return plan


def macs(gm: fx.GraphModule, n: fx.Node, base: dict[str, Any]) -> int:
    """Multiply-adds of a convolution or linear node (module or operator) for one image."""
    out = base.get(n.name)
    if not isinstance(out, torch.Tensor):
        return 0
    weight = None
    if n.op == "call_module":
        m = gm.get_submodule(str(n.target))
        if isinstance(m, (nn.Conv2d, nn.Linear)):
            weight = m.weight
    elif n.op == "call_function" and n.target in (F.conv2d, _ATEN.conv2d.default, F.linear, _ATEN.linear.default):
        w = n.args[1] if len(n.args) > 1 else n.kwargs.get("weight")
        weight = base.get(w.name) if isinstance(w, fx.Node) else None
    if not isinstance(weight, torch.Tensor):
        return 0
    if weight.dim() == 4:
        return int(weight.numel()) * int(out.shape[-2] * out.shape[-1])
    return int(weight.numel()) * (int(out.numel()) // max(1, int(out.shape[0])) // int(weight.shape[0]))


@dataclass(frozen=True)
class Slide:
    """A sliding-window node we can compute on windows: its two axes, the value its padding holds, the
    operation with padding 0 (for crops that carry their padding), and its multiply-adds per output."""

    rows: Window
    cols: Window
    pad: float
    op: Callable[[torch.Tensor], torch.Tensor]
    macs_per_output: int = 0


def _pair(v: Any) -> tuple[int, int]:
    if isinstance(v, int):
        return v, v
    v = list(v)
    return (int(v[0]), int(v[0])) if len(v) == 1 else (int(v[0]), int(v[1]))


def _conv(weight: torch.Tensor, bias: Any, stride: Any, padding: Any, dilation: Any, groups: int) -> Slide | None:
    if isinstance(padding, str) or not isinstance(weight, torch.Tensor) or weight.dim() != 4:
        return None
    if bias is not None and not isinstance(bias, torch.Tensor):
        return None
    k, s, p, d = _pair(tuple(weight.shape[2:])), _pair(stride), _pair(padding), _pair(dilation)
    s_, d_ = tuple(s), tuple(d)
    per = int(weight.shape[0]) * int(weight.shape[1]) * k[0] * k[1]
    return Slide(Window(k[0], s[0], p[0], d[0]), Window(k[1], s[1], p[1], d[1]), 0.0,
                 lambda t: F.conv2d(t, weight, bias, s_, 0, d_, groups), per)


def _max_pool(kernel: Any, stride: Any, padding: Any, dilation: Any, ceil_mode: bool) -> Slide:
    k = _pair(kernel)
    s = _pair(stride) if stride not in (None, [], ()) else k
    p, d = _pair(padding), _pair(dilation)
    rows, cols = Window(k[0], s[0], p[0], d[0]), Window(k[1], s[1], p[1], d[1])
    return Slide(rows, cols, float("-inf"), lambda t: F.max_pool2d(t, k, s, 0, d, ceil_mode=ceil_mode))


def _avg_pool(kernel: Any, stride: Any, padding: Any, ceil_mode: bool, count_include_pad: bool,
              divisor_override: Any) -> Slide | None:
    k = _pair(kernel)
    s = _pair(stride) if stride not in (None, [], ()) else k
    p = _pair(padding)
    if ceil_mode or divisor_override is not None or (not count_include_pad and p != (0, 0)):
        return None  # the divisor would change at the border
    return Slide(Window(k[0], s[0], p[0]), Window(k[1], s[1], p[1]), 0.0, lambda t: F.avg_pool2d(t, k, s, 0))


def _bind(target: Any, args: Sequence[Any], kwargs: dict[str, Any], names: Sequence[str],
          defaults: Sequence[Any]) -> list[Any] | None:
    """Positional and keyword arguments of an operator call as one list, defaults filled in."""
    out = list(args) + list(defaults[len(args):])
    if len(args) > len(names):
        return None
    for k, v in kwargs.items():
        if k not in names:
            return None
        out[names.index(k)] = v
    return out


_CONV_ARGS = ("input", "weight", "bias", "stride", "padding", "dilation", "groups")
_MAX_ARGS = ("input", "kernel_size", "stride", "padding", "dilation", "ceil_mode")
_AVG_ARGS = ("input", "kernel_size", "stride", "padding", "ceil_mode", "count_include_pad", "divisor_override")


def sliding(gm: fx.GraphModule, n: fx.Node, args: Sequence[Any], kwargs: dict[str, Any]) -> Slide | None:
    """The Slide of node ``n`` (a module or an operator call, with its arguments' values), or None."""
    if n.op == "call_module":
        m = gm.get_submodule(str(n.target))
        if len(args) != 1 or kwargs:
            return None
        if isinstance(m, nn.Conv2d):
            if m.padding_mode != "zeros":
                return None
            return _conv(m.weight, m.bias, m.stride, m.padding, m.dilation, m.groups)
        if isinstance(m, nn.MaxPool2d) and not m.return_indices:
            return _max_pool(m.kernel_size, m.stride, m.padding, m.dilation, bool(m.ceil_mode))
        if isinstance(m, nn.AvgPool2d):
            return _avg_pool(m.kernel_size, m.stride, m.padding, bool(m.ceil_mode), bool(m.count_include_pad),
                             m.divisor_override)
        return None
    if n.op != "call_function":
        return None
    t = n.target
    if t in (F.conv2d, _ATEN.conv2d.default):
        b = _bind(t, args, kwargs, _CONV_ARGS, (None, None, None, 1, 0, 1, 1))
        return None if b is None else _conv(b[1], b[2], b[3], b[4], b[5], int(b[6]))
    if t in (F.max_pool2d, _ATEN.max_pool2d.default):
        b = _bind(t, args, kwargs, _MAX_ARGS, (None, None, None, 0, 1, False))
        return None if b is None else _max_pool(b[1], b[2], b[3], b[4], bool(b[5]))
    if t in (F.avg_pool2d, _ATEN.avg_pool2d.default):
        b = _bind(t, args, kwargs, _AVG_ARGS, (None, None, None, 0, False, True, None))
        return None if b is None else _avg_pool(b[1], b[2], b[3], bool(b[4]), bool(b[5]), b[6])
    return None


def materialise(v: Patched) -> torch.Tensor:
    """The full per-position maps [B, C, H, W]: the cached value with each window spliced in."""
    out = v.base.expand(len(v.starts), *v.base.shape[1:]).clone()
    wh, ww = v.size
    for i, (r, c) in enumerate(v.starts):
        out[i, :, r : r + wh, c : c + ww] = v.data[i]
    return out


def crop(v: Patched, starts: Sequence[tuple[int, int]], size: tuple[int, int], pad_value: float) -> torch.Tensor:
    """Per-position values [B, C, h, w] over windows that may reach into padding (filled with ``pad_value``)."""
    _, _, hh, ww_ = v.base.shape
    h, w = size
    top = max(0, -min(r for r, _ in starts))
    left = max(0, -min(c for _, c in starts))
    bottom = max(0, max(r for r, _ in starts) + h - hh)
    right = max(0, max(c for _, c in starts) + w - ww_)
    padded = v.base
    if top or left or bottom or right:
        padded = F.pad(v.base, (left, right, top, bottom), value=pad_value)
    # 4-D slices joined by cat keep the map's memory order (a channels-last map copies whole pixel rows)
    out = torch.cat([padded[:, :, r + top : r + top + h, c + left : c + left + w] for r, c in starts])
    vh, vw = v.size
    for i, ((r, c), (sr, sc)) in enumerate(zip(starts, v.starts, strict=True)):
        r0, r1 = max(r, sr), min(r + h, sr + vh)
        c0, c1 = max(c, sc), min(c + w, sc + vw)
        if r0 < r1 and c0 < c1:
            out[i, :, r0 - r : r1 - r, c0 - c : c1 - c] = v.data[i, :, r0 - sr : r1 - sr, c0 - sc : c1 - sc]
    return out


def _placed(regions: list[tuple[tuple[int, int], tuple[int, int]]], shape: torch.Size
            ) -> tuple[list[tuple[int, int]], tuple[int, int]]:
    """One window size for the batch (the largest region, at least 1 x 1) and each position's start."""
    h, w = int(shape[2]), int(shape[3])
    wh = max(1, max(r[1] - r[0] for r, _ in regions))
    ww = max(1, max(c[1] - c[0] for _, c in regions))
    return [(place(r[0], wh, h), place(c[0], ww, w)) for r, c in regions], (wh, ww)


class Runner:
    """Runs a batch of patch positions through a traced model, windows where it can, full maps elsewhere."""

    def __init__(self, plan: Plan, truncate_share: float = 1.0) -> None:
        self.plan = plan
        self.gm = plan.graph
        self.truncate_share = truncate_share
        self.macs_done = 0

    def _cut(self, regions: list, shape: torch.Size) -> list:
        if self.truncate_share >= 1.0:
            return regions
        h = max(1, round(self.truncate_share * int(shape[2])))
        w = max(1, round(self.truncate_share * int(shape[3])))
        return [(truncate(r, h), truncate(c, w)) for r, c in regions]

    def _wide(self, size: tuple[int, int], shape: torch.Size) -> bool:
        return size[0] * size[1] >= FULL_SHARE * int(shape[2]) * int(shape[3])

    def _patched(self, name: str, regions: list, make: Callable[[list, tuple[int, int]], torch.Tensor]) -> Any:
        """A Patched value of node ``name`` for ``regions``, or Full when the window would be too wide."""
        base = self.plan.base[name]
        regions = self._cut(regions, base.shape)
        starts, size = _placed(regions, base.shape)
        if self._wide(size, base.shape) and self.truncate_share >= 1.0:
            return None
        return Patched(base, regions, starts, size, make(starts, size))

    def run(self, x_patches: torch.Tensor, boxes: Sequence[tuple[int, int, int, int]]) -> torch.Tensor:
        """Logits [B, K] for the images equal to the cached input except ``x_patches[i]`` on ``boxes[i]``
        (row, col, height, width)."""
        env: dict[str, Any] = {}
        result = None
        for n in self.gm.graph.nodes:
            if n.op == "output":
                result = self._full_arg(self._args(n.args, env)[0])
                if isinstance(result, (tuple, list)) and len(result) == 1:
                    result = result[0]  # a torch.export graph returns its one output in a tuple
                break
            if n.name not in self.plan.depends:
                env[n.name] = self.plan.base[n.name]
                continue
            if n.op == "placeholder":
                base = self.plan.base[n.name]
                regions = [((r, r + h), (c, c + w)) for r, c, h, w in boxes]
                h, w = boxes[0][2], boxes[0][3]
                env[n.name] = Patched(base, regions, [(r, c) for r, c, _, _ in boxes], (h, w), x_patches)
                continue
            env[n.name] = self._node(n, env)
        return result

    def _args(self, args: Any, env: dict[str, Any]) -> Any:
        return fx.node.map_arg(args, lambda a: env[a.name])

    def _full_arg(self, v: Any) -> Any:
        if isinstance(v, Patched):
            return materialise(v)
        if isinstance(v, Full):
            return v.value
        if isinstance(v, (list, tuple)):
            return type(v)(self._full_arg(a) for a in v)
        return v

    def _node(self, n: fx.Node, env: dict[str, Any]) -> Any:
        args, kwargs = self._args(n.args, env), self._args(n.kwargs, env)
        first = args[0] if args else None
        if n.op == "call_function" and n.target in CAT and isinstance(first, (list, tuple)):
            out = self._cat(n, list(first), args[1:], kwargs)
            if out is not None:
                return out
        if isinstance(first, Patched):
            out = self._windowed(n, args, kwargs, first)
            if out is not None:
                return out
        if n.op == "call_method" and n.target in ("size", "dim") and isinstance(first, Patched):
            meta = torch.empty((len(first.starts), *first.base.shape[1:]), device="meta")
            return getattr(meta, str(n.target))(*args[1:], **kwargs)
        if n.op == "call_function" and n.target is getattr and isinstance(first, Patched) and args[1] == "shape":
            return torch.Size((len(first.starts), *first.base.shape[1:]))
        return self._in_full(n, args, kwargs)

    def _in_full(self, n: fx.Node, args: Any, kwargs: Any) -> Any:
        fa, fk = self._full_arg(args), self._full_arg(kwargs)
        if n.op == "call_module":
            m = self.gm.get_submodule(str(n.target))
            out = m(*fa, **fk)
        elif n.op == "call_method":
            out = getattr(fa[0], str(n.target))(*fa[1:], **fk)
        else:
            out = n.target(*fa, **fk)  # type: ignore[operator]
        self.macs_done += macs(self.gm, n, self.plan.base) * _batch(fa[0] if fa else None)
        if any(isinstance(a, (Patched, Full)) for a in _flat(args)):
            return Full(out)
        return out  # plain values (shapes, numbers) that depend on the batch

    def _windowed(self, n: fx.Node, args: Any, kwargs: Any, first: Patched) -> Any:
        """The node computed on windows, or None when it must be computed in full."""
        if not _per_position(args[1:], kwargs):
            slide = sliding(self.gm, n, args, kwargs)
            if slide is not None:
                return self._sliding(n, first, slide)
            if n.op == "call_function" and n.target is _ATEN.batch_norm.default and args[5:6] != (True,):
                return self._pointwise(n, first, lambda t: n.target(t, *args[1:], **kwargs))  # type: ignore[operator]
        if n.op == "call_module":
            m = self.gm.get_submodule(str(n.target))
            if isinstance(m, POINTWISE_MODULES) and len(args) == 1 and not kwargs:
                return self._pointwise(n, first, lambda t: m(t))
        if n.op == "call_function" and n.target in POINTWISE_FUNCTIONS and not _tensors(args[1:], kwargs):
            return self._pointwise(n, first, lambda t: n.target(t, *args[1:], **kwargs))  # type: ignore[operator]
        if n.op == "call_method" and n.target in POINTWISE_METHODS and not _tensors(args[1:], kwargs):
            return self._pointwise(n, first, lambda t: getattr(t, str(n.target))(*args[1:], **kwargs))
        if n.op == "call_function" and n.target in ADD and len(args) == 2 and not kwargs:
            if isinstance(args[1], Patched) and args[1].base.shape == first.base.shape:
                return self._joined(n, list(args), lambda ts: ts[0] + ts[1])
            if isinstance(args[1], (int, float)):
                return self._pointwise(n, first, lambda t: t + args[1])
        return None

    def _cat(self, n: fx.Node, parts: list[Any], rest: Any, kwargs: Any) -> Any:
        dim = rest[0] if rest else kwargs.get("dim", 0)
        if set(kwargs) - {"dim"} or dim not in (1, -3) or not parts or not all(isinstance(p, Patched) for p in parts):
            return None
        if len({p.base.shape[2:] for p in parts}) != 1 or parts[0].base.dim() != 4:
            return None
        return self._joined(n, parts, lambda ts: torch.cat(ts, 1))

    def _pointwise(self, n: fx.Node, v: Patched, op: Callable[[torch.Tensor], torch.Tensor]) -> Patched:
        return Patched(self.plan.base[n.name], v.regions, v.starts, v.size, op(v.data))

    def _sliding(self, n: fx.Node, v: Patched, slide: Slide) -> Any:
        rows, cols = slide.rows, slide.cols
        out_shape = self.plan.base[n.name].shape
        oh, ow = int(out_shape[2]), int(out_shape[3])
        regions = [(rows.changed(*r, oh), cols.changed(*c, ow)) for r, c in v.regions]

        def make(starts: list[tuple[int, int]], size: tuple[int, int]) -> torch.Tensor:
            need = [(rows.needs(r, size[0])[0], cols.needs(c, size[1])[0]) for r, c in starts]
            in_size = (rows.needs(0, size[0])[1] - rows.needs(0, size[0])[0],
                       cols.needs(0, size[1])[1] - cols.needs(0, size[1])[0])
            self.macs_done += slide.macs_per_output * size[0] * size[1] * len(starts)
            return slide.op(crop(v, need, in_size, slide.pad))

        return self._patched(n.name, regions, make)

    def _joined(self, n: fx.Node, parts: list[Patched], op: Callable[[list[torch.Tensor]], torch.Tensor]) -> Any:
        regions = [(reduce(union, (p.regions[i][0] for p in parts)), reduce(union, (p.regions[i][1] for p in parts)))
                   for i in range(len(parts[0].starts))]

        def make(starts: list[tuple[int, int]], size: tuple[int, int]) -> torch.Tensor:
            return op([crop(p, starts, size, 0.0) for p in parts])

        return self._patched(n.name, regions, make)


def _batch(t: Any) -> int:
    return int(t.shape[0]) if isinstance(t, torch.Tensor) else 1


def _flat(a: Any) -> list[Any]:
    if isinstance(a, (list, tuple)):
        return [y for x in a for y in _flat(x)]
    if isinstance(a, dict):
        return [y for x in a.values() for y in _flat(x)]
    return [a]


def _per_position(args: Any, kwargs: Any) -> bool:
    return any(isinstance(a, (Patched, Full)) for a in _flat(args) + _flat(kwargs))


def _tensors(args: Any, kwargs: Any) -> bool:
    return any(isinstance(a, (torch.Tensor, Patched, Full)) for a in _flat(args) + _flat(kwargs))


__all__ = ["FULL_SHARE", "Full", "NotTraceable", "Patched", "Plan", "Runner", "crop", "macs", "materialise",
           "projective_macs", "trace"]


def projective_macs(plan: Plan, boxes: Sequence[tuple[int, int, int, int]]) -> int:
    """Multiply-adds the patches' projective fields require, summed over ``boxes`` (row, col, height,
    width): each convolution computed only where its output can change, every layer after the first
    whole-map node (pooling to a vector, flatten, ...) in full. The lower bound of any exact incremental
    method that shares this graph; ``len(boxes) * plan.macs_full`` is the cost of full forward passes."""
    gm, base = plan.graph, plan.base
    regions: dict[str, list | None] = {}  # None: changed everywhere
    total = 0
    for n in gm.graph.nodes:
        if n.name not in plan.depends or n.op == "output":
            continue
        ins = [regions.get(a.name) for a in n.all_input_nodes if a.name in plan.depends]
        if n.op == "placeholder":
            regions[n.name] = [((r, r + h), (c, c + w)) for r, c, h, w in boxes]
            continue
        known = all(x is not None for x in ins) and ins
        out: list | None = None
        m = gm.get_submodule(str(n.target)) if n.op == "call_module" else None
        values = fx.node.map_arg((n.args, n.kwargs), lambda a: base[a.name])
        slide = sliding(gm, n, values[0], values[1]) if known and len(ins) == 1 else None
        if slide is not None:
            oh, ow = int(base[n.name].shape[2]), int(base[n.name].shape[3])
            out = [(slide.rows.changed(*r, oh), slide.cols.changed(*c, ow)) for r, c in ins[0]]
        elif known and (isinstance(m, POINTWISE_MODULES) or n.target in POINTWISE_FUNCTIONS
                        or n.target is _ATEN.batch_norm.default
                        or (n.op == "call_method" and n.target in POINTWISE_METHODS)) and len(ins) == 1:
            out = ins[0]
        elif known and (n.target in ADD or n.target in CAT):
            out = [(reduce(union, (x[i][0] for x in ins)), reduce(union, (x[i][1] for x in ins)))
                   for i in range(len(boxes))]
        regions[n.name] = out
        if out is None:
            total += macs(gm, n, base) * len(boxes)
        elif slide is not None:
            total += sum(slide.macs_per_output * (r[1] - r[0]) * (c[1] - c[0]) for r, c in out)
    return total
