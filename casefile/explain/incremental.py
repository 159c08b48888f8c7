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

from .fields import Window, place, truncate, union

FULL_SHARE = 0.6  # a window covering this share of its map switches to full maps (measured: benchmarks)

POINTWISE_MODULES = (
    nn.ReLU, nn.ReLU6, nn.LeakyReLU, nn.ELU, nn.GELU, nn.SiLU, nn.Sigmoid, nn.Tanh, nn.Hardswish,
    nn.Hardsigmoid, nn.Mish, nn.Identity, nn.Dropout, nn.Dropout2d, nn.BatchNorm2d,
)
POINTWISE_FUNCTIONS = {
    torch.relu, F.relu, F.relu6, F.leaky_relu, F.gelu, F.silu, F.elu, F.hardswish, torch.sigmoid, torch.tanh,
    F.sigmoid, F.tanh,
}
POINTWISE_METHODS = {"relu", "sigmoid", "tanh", "contiguous"}
ADD = {operator.add, operator.iadd, torch.add}


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


def trace(module: nn.Module, x: torch.Tensor) -> Plan:
    """Trace ``module`` and run ``x`` once, keeping every node's value; NotTraceable when tracing fails."""
    try:
        gm = module if isinstance(module, fx.GraphModule) else fx.symbolic_trace(module)
    except Exception as exc:  # any tracing failure means the plain method, with the reason recorded
        first = (str(exc).strip().splitlines() or [""])[0][:160]
        raise NotTraceable(f"{type(exc).__name__}: {first}") from None
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


def macs(gm: fx.GraphModule, n: fx.Node, base: dict[str, Any], area: int | None = None) -> int:
    """Multiply-adds of a convolution or linear node for one image (``area`` output positions if given)."""
    if n.op != "call_module":
        return 0
    m = gm.get_submodule(str(n.target))
    out = base[n.name]
    if isinstance(m, nn.Conv2d):
        per = m.out_channels * (m.in_channels // m.groups) * m.kernel_size[0] * m.kernel_size[1]
        return per * (area if area is not None else out.shape[2] * out.shape[3])
    if isinstance(m, nn.Linear):
        return m.in_features * m.out_features * (out.numel() // m.out_features)
    return 0


def _window_axes(m: nn.Module) -> tuple[Window, Window, bool, float] | None:
    """(rows, cols, ceil_mode, pad value) of a sliding-window module we can compute on windows."""
    def pair(v: Any) -> tuple[int, int]:
        return (v, v) if isinstance(v, int) else (int(v[0]), int(v[1]))

    if isinstance(m, nn.Conv2d):
        if m.padding_mode != "zeros" or isinstance(m.padding, str):
            return None
        k, s, p, d = pair(m.kernel_size), pair(m.stride), pair(m.padding), pair(m.dilation)
        ceil, pad = False, 0.0
    elif isinstance(m, nn.MaxPool2d):
        if m.return_indices:
            return None
        k, p, d = pair(m.kernel_size), pair(m.padding), pair(m.dilation)
        s = pair(m.stride if m.stride is not None else m.kernel_size)
        ceil, pad = bool(m.ceil_mode), float("-inf")
    elif isinstance(m, nn.AvgPool2d):
        p = pair(m.padding)
        if m.ceil_mode or m.divisor_override is not None or (not m.count_include_pad and p != (0, 0)):
            return None
        k, d = pair(m.kernel_size), (1, 1)
        s = pair(m.stride if m.stride is not None else m.kernel_size)
        ceil, pad = False, 0.0
    else:
        return None
    return Window(k[0], s[0], p[0], d[0]), Window(k[1], s[1], p[1], d[1]), ceil, pad


def _unpadded(m: nn.Module) -> Callable[[torch.Tensor], torch.Tensor]:
    """The module's operation with padding 0, for input crops that already carry their padding."""
    if isinstance(m, nn.Conv2d):
        return lambda t: F.conv2d(t, m.weight, m.bias, m.stride, 0, m.dilation, m.groups)
    if isinstance(m, nn.MaxPool2d):
        return lambda t: F.max_pool2d(t, m.kernel_size, m.stride or m.kernel_size, 0, m.dilation)
    return lambda t: F.avg_pool2d(t, m.kernel_size, m.stride or m.kernel_size, 0)


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
    out = torch.stack([padded[0, :, r + top : r + top + h, c + left : c + left + w] for r, c in starts])
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
        self.full_from: set[str] = set()  # nodes computed in full maps, for the record
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
        if n.op == "call_function" and n.target is torch.cat and isinstance(first, (list, tuple)):
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
            if isinstance(m, (nn.Conv2d, nn.Linear)):
                self.macs_done += macs(self.gm, n, self.plan.base) * _batch(fa[0])
        elif n.op == "call_method":
            out = getattr(fa[0], str(n.target))(*fa[1:], **fk)
        else:
            out = n.target(*fa, **fk)  # type: ignore[operator]
        if any(isinstance(a, (Patched, Full)) for a in _flat(args)):
            self.full_from.add(n.name)
            return Full(out)
        return out  # plain values (shapes, numbers) that depend on the batch

    def _windowed(self, n: fx.Node, args: Any, kwargs: Any, first: Patched) -> Any:
        """The node computed on windows, or None when it must be computed in full."""
        if n.op == "call_module":
            m = self.gm.get_submodule(str(n.target))
            if isinstance(m, POINTWISE_MODULES) and len(args) == 1 and not kwargs:
                return self._pointwise(n, first, lambda t: m(t))
            axes = _window_axes(m)
            if axes is not None and len(args) == 1 and not kwargs:
                return self._sliding(n, m, first, axes)
            return None
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

    def _sliding(self, n: fx.Node, m: nn.Module, v: Patched, axes: tuple[Window, Window, bool, float]) -> Any:
        rows, cols, _, pad = axes
        out_shape = self.plan.base[n.name].shape
        oh, ow = int(out_shape[2]), int(out_shape[3])
        regions = [(rows.changed(*r, oh), cols.changed(*c, ow)) for r, c in v.regions]
        op = _unpadded(m)

        def make(starts: list[tuple[int, int]], size: tuple[int, int]) -> torch.Tensor:
            need = [(rows.needs(r, size[0])[0], cols.needs(c, size[1])[0]) for r, c in starts]
            in_size = (rows.needs(0, size[0])[1] - rows.needs(0, size[0])[0],
                       cols.needs(0, size[1])[1] - cols.needs(0, size[1])[0])
            if isinstance(m, nn.Conv2d):
                self.macs_done += macs(self.gm, n, self.plan.base, area=size[0] * size[1]) * len(starts)
            return op(crop(v, need, in_size, pad))

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


def _tensors(args: Any, kwargs: Any) -> bool:
    return any(isinstance(a, (torch.Tensor, Patched, Full)) for a in _flat(args) + _flat(kwargs))


__all__ = ["FULL_SHARE", "Full", "NotTraceable", "Patched", "Plan", "Runner", "crop", "macs", "materialise", "trace"]
