"""Grad-CAM (Selvaraju et al. 2017) on any named layer, and gradient saliency (Simonyan et al. 2014)."""

from __future__ import annotations

import numpy as np
import torch
import torch.nn.functional as F
from torch import nn

from casefile.errors import ExplainError

from ._common import (
    call_model,
    check_input,
    check_logits,
    get_layer,
    model_left_as_found,
    pick_target,
    to_map,
)


def hookable_layer(module: nn.Module, layer: str) -> nn.Module:
    """The submodule ``layer``, refused with a one-line ExplainError when it cannot take a forward hook."""
    sub = get_layer(module, layer)
    if isinstance(sub, torch.jit.ScriptModule):
        raise ExplainError(
            f"layer {layer!r}: Grad-CAM needs a forward hook, which TorchScript modules do not allow;"
            " use a torch.export archive (.pt2) or a Python entry point for this model"
        )
    return sub


def _capture(module: nn.Module, x: torch.Tensor, layer: str) -> tuple[torch.Tensor, torch.Tensor]:
    """Forward ``x`` with a hook on ``layer``; return (logits, the layer's activation)."""
    sub = hookable_layer(module, layer)
    captured: list[torch.Tensor] = []

    def hook(_m: nn.Module, _inp: object, out: object) -> object:
        if not isinstance(out, torch.Tensor):
            raise ExplainError(f"layer {layer!r}: output is a {type(out).__name__}, not a tensor")
        captured.append(out)
        # Hand a copy downstream so an in-place op after this layer (ReLU(inplace=True)) cannot
        # overwrite the activation we keep; the values seen by the rest of the model are identical.
        return out.clone()

    handle = sub.register_forward_hook(hook)
    try:
        with torch.enable_grad():
            # The input carries a graph so the activation has one even when every parameter is frozen.
            xin = x.detach().clone().requires_grad_(True)
            logits = check_logits(call_model(module, xin))
    finally:
        handle.remove()
    if not captured:
        raise ExplainError(f"layer {layer!r}: was not called in the forward pass (no activation captured)")
    act = captured[-1]
    if act.dim() != 4 or act.shape[0] != 1:
        raise ExplainError(f"layer {layer!r}: expected a feature map [1, K, h, w], got {list(act.shape)}")
    return logits, act


def gradcam(
    module: nn.Module,
    x: torch.Tensor,
    target: int | None = None,
    *,
    layer: str,
    return_raw: bool = False,
) -> np.ndarray | tuple[np.ndarray, np.ndarray]:
    """Grad-CAM map float32 [H, W] for class ``target`` (default: the predicted class).

    Weights are the spatial mean of d(logit)/d(activation) per channel; the map is
    ReLU(sum_k w_k A^k) at the layer's resolution, upsampled bilinearly to the input size.
    With ``return_raw=True`` returns ``(map, raw_map_at_layer_resolution)``. A layer called more
    than once in a forward pass is explained at its last call. Works inside the caller's
    ``torch.no_grad()`` or ``torch.inference_mode()``.
    The model is left exactly as found (mode, requires_grad, parameters, parameter .grad).
    """
    x = check_input(x)
    with model_left_as_found(module), torch.inference_mode(False), torch.enable_grad():
        logits, act = _capture(module, x, layer)
        t = pick_target(logits, target)
        if not act.requires_grad:
            raise ExplainError(
                f"layer {layer!r}: activation does not depend on the input; cannot take gradients"
            )
        (grad,) = torch.autograd.grad(logits[0, t], act, allow_unused=True)
        if grad is None:
            grad = torch.zeros_like(act)
        with torch.no_grad():
            weights = grad.mean(dim=(2, 3), keepdim=True)
            raw = F.relu((weights * act).sum(dim=1, keepdim=True))
            up = F.interpolate(raw, size=tuple(x.shape[2:]), mode="bilinear", align_corners=False)
    full = to_map(up[0, 0])
    if return_raw:
        return full, to_map(raw[0, 0])
    return full


def gradient(module: nn.Module, x: torch.Tensor, target: int | None = None) -> np.ndarray:
    """Gradient saliency float32 [H, W]: |d logit / d pixel|, maximum over colour channels."""
    x = check_input(x)
    with model_left_as_found(module):
        with torch.inference_mode(False), torch.enable_grad():
            xin = x.detach().clone().requires_grad_(True)
            logits = check_logits(call_model(module, xin))
            t = pick_target(logits, target)
            (grad,) = torch.autograd.grad(logits[0, t], xin, allow_unused=True)
    if grad is None:
        grad = torch.zeros_like(x)
    return to_map(grad[0].abs().amax(dim=0))
