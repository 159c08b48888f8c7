"""Shared helpers for the explanation methods: input checks, target choice, and leaving the model as found."""

from __future__ import annotations

import itertools
from collections.abc import Iterator
from contextlib import contextmanager

import numpy as np
import torch
from torch import nn

from casefile.errors import CasefileError, ExplainError, one_line


def check_input(x: object) -> torch.Tensor:
    """Return ``x`` if it is a floating Tensor[1, C, H, W]; otherwise raise a one-line ExplainError."""
    if not isinstance(x, torch.Tensor):
        raise ExplainError(f"input: expected a torch.Tensor [1, C, H, W], got {type(x).__name__}")
    if x.dim() != 4 or x.shape[0] != 1:
        raise ExplainError(f"input: expected shape [1, C, H, W], got {list(x.shape)}")
    if not x.is_floating_point():
        raise ExplainError(f"input: expected a floating-point tensor, got {x.dtype}")
    if x.shape[2] < 1 or x.shape[3] < 1:
        raise ExplainError(f"input: empty image of shape {list(x.shape)}")
    return x


def check_logits(out: object) -> torch.Tensor:
    """Return the model output as logits [1, K] (K >= 2); raise ExplainError for any other shape."""
    if not isinstance(out, torch.Tensor):
        raise ExplainError(f"model output: expected a Tensor of class logits, got {type(out).__name__}")
    if out.dim() != 2 or out.shape[0] != 1 or out.shape[1] < 2:
        raise ExplainError(
            f"model output: expected class logits of shape [1, K] with K >= 2, got {list(out.shape)}"
        )
    return out


def pick_target(logits: torch.Tensor, target: int | None) -> int:
    """The class to explain: ``target`` if given (checked against K), else the predicted class."""
    k = int(logits.shape[1])
    if target is None:
        row = torch.nan_to_num(logits[0].detach(), nan=-torch.inf)
        return int(torch.argmax(row).item())
    if isinstance(target, bool) or not isinstance(target, (int, np.integer)):
        raise ExplainError(f"target: expected a class index, got {target!r}")
    if not 0 <= int(target) < k:
        raise ExplainError(f"target: class index {int(target)} is outside 0..{k - 1}")
    return int(target)


def get_layer(module: nn.Module, layer: str) -> nn.Module:
    """The submodule named ``layer`` (as in ``module.named_modules()``), or a one-line ExplainError."""
    modules = dict(module.named_modules())
    if not isinstance(layer, str) or layer not in modules or layer == "":
        names = [n for n in modules if n]
        shown = ", ".join(names[:12]) + (" ..." if len(names) > 12 else "")
        raise ExplainError(f"layer {layer!r}: not found in the model; layers are: {shown}")
    return modules[layer]


@contextmanager
def model_left_as_found(module: nn.Module) -> Iterator[nn.Module]:
    """Run the body with every submodule in eval mode; restore each module's mode and each
    parameter's ``requires_grad`` flag afterwards, even when the body raises.

    Eval mode matters: in train mode BatchNorm would use the statistics of a one-image batch and
    overwrite its running statistics (buffers), changing the model. The methods take gradients with
    ``torch.autograd.grad``, so parameter ``.grad`` fields are never written.
    """
    modes = [(m, m.training) for m in module.modules()]
    flags = [(p, p.requires_grad) for p in module.parameters()]
    try:
        module.eval()
        yield module
    finally:
        for m, mode in modes:
            m.training = mode
        for p, flag in flags:
            if p.requires_grad != flag:
                p.requires_grad_(flag)


def call_model(module: nn.Module, x: torch.Tensor) -> object:
    """``module(x)``; a failure inside the model becomes a one-line ExplainError naming the input shape."""
    try:
        return module(x)
    except CasefileError:
        raise
    except Exception as exc:  # any error raised by user model code is reported, not shown as a traceback
        first = one_line(exc, limit=200)
        raise ExplainError(
            f"model: forward pass failed on an input of shape {list(x.shape)}: {type(exc).__name__}: {first}"
        ) from None


def batched_logits(module: nn.Module, xs: torch.Tensor, batch_size: int) -> tuple[torch.Tensor, int]:
    """Logits [N, K] for the images ``xs`` [N, C, H, W], ``batch_size`` at a time, without a graph.

    A model whose batch is fixed at one (exported for a static batch of one, or whose output batch
    does not follow the input batch) refuses bigger batches or answers them with the wrong number of
    rows; then the images go one at a time. Returns the logits and the batch size that worked (1 after
    such a fallback), so the caller can record it.
    """
    outs: list[torch.Tensor] = []
    with torch.no_grad():
        start = 0
        while start < len(xs):
            chunk = xs[start : start + batch_size]
            try:
                out = call_model(module, chunk)
            except ExplainError:
                if len(chunk) == 1:
                    raise
                batch_size = 1
                continue
            if not isinstance(out, torch.Tensor) or out.dim() != 2 or out.shape[0] != len(chunk):
                if len(chunk) > 1 and isinstance(out, torch.Tensor):
                    batch_size = 1  # the output batch does not follow the input batch: one at a time
                    continue
                shape = list(out.shape) if isinstance(out, torch.Tensor) else type(out).__name__
                raise ExplainError(
                    f"model output: expected logits [{len(chunk)}, K] for a batch of {len(chunk)}, got {shape}"
                )
            outs.append(out.detach())
            start += len(chunk)
    return torch.cat(outs), batch_size


def forward_logits(module: nn.Module, x: torch.Tensor) -> torch.Tensor:
    """One forward pass returning checked logits [1, K] (no graph kept)."""
    with torch.no_grad():
        return check_logits(call_model(module, x)).detach()


def to_map(t: torch.Tensor) -> np.ndarray:
    """A 2-D tensor as a contiguous float32 numpy array."""
    return np.ascontiguousarray(t.detach().to(torch.float32).cpu().numpy())


@contextmanager
def channels_last(module: nn.Module, x: torch.Tensor) -> Iterator[tuple[torch.Tensor, object]]:
    """Run the body with the model's 4-D weights and the input in channels-last (NHWC) memory order where
    the model takes it; yield the input to use and the model's output on it (the forward that tried the
    order, so the caller need not run it again). Every weight's own tensor is put back afterwards.

    Only the memory order changes, not a value: PyTorch's operators index tensors by their logical
    shape. Measured on two cores (benchmarks/bench_hygiene.py): forward passes over batches of covered
    copies ran 1.3x faster for the ResNet-18 layout at 224 px and 1.8x for the demo's TinyNet at 64 px,
    and the incremental method's windows copy whole pixel rows; exact occlusion maps moved by float
    rounding only (below 1e-7). A model whose forward fails in that order (a ``.view`` over a spatial
    map, custom code that assumes NCHW strides) runs as it is.
    """
    weights = [t for t in itertools.chain(module.parameters(), module.buffers()) if t.dim() == 4]
    if x.dim() != 4 or not weights:
        yield x, call_model(module, x)
        return
    kept = [(t, t.data) for t in weights]
    for t in weights:
        t.data = t.data.contiguous(memory_format=torch.channels_last)
    nhwc = x.contiguous(memory_format=torch.channels_last)
    try:
        try:
            out = call_model(module, nhwc)
        except ExplainError:  # the model refuses this order: the weights go back now, and it runs as given
            for t, data in kept:
                t.data = data
            yield x, call_model(module, x)
            return
        yield nhwc, out
    finally:
        for t, data in kept:
            t.data = data
