"""Benchmark of the explanation methods: cost ratios measured side by side in one run (nothing asserted)."""

from __future__ import annotations

import time
from collections.abc import Callable

import torch
from torch import nn

from casefile.explain import gradcam, occlusion
from casefile.explain.occlusion import positions


class Block(nn.Module):
    """Two 3x3 convolutions with BatchNorm and a shortcut (the basic residual block)."""

    def __init__(self, cin: int, cout: int, stride: int) -> None:
        super().__init__()
        self.conv1 = nn.Conv2d(cin, cout, 3, stride, 1, bias=False)
        self.bn1 = nn.BatchNorm2d(cout)
        self.conv2 = nn.Conv2d(cout, cout, 3, 1, 1, bias=False)
        self.bn2 = nn.BatchNorm2d(cout)
        self.short = (
            nn.Sequential(nn.Conv2d(cin, cout, 1, stride, bias=False), nn.BatchNorm2d(cout))
            if stride != 1 or cin != cout
            else nn.Identity()
        )

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        y = torch.relu(self.bn1(self.conv1(x)))
        return torch.relu(self.bn2(self.conv2(y)) + self.short(x))


class ResNet18Shape(nn.Module):
    """The ResNet-18 layout (He et al. 2016): stem, four stages of two blocks, pool, linear. Random weights."""

    def __init__(self, classes: int = 2) -> None:
        super().__init__()
        self.stem = nn.Sequential(
            nn.Conv2d(3, 64, 7, 2, 3, bias=False), nn.BatchNorm2d(64), nn.ReLU(), nn.MaxPool2d(3, 2, 1)
        )
        widths, stages, cin = (64, 128, 256, 512), [], 64
        for i, w in enumerate(widths):
            stages.append(nn.Sequential(Block(cin, w, 1 if i == 0 else 2), Block(w, w, 1)))
            cin = w
        self.layer1, self.layer2, self.layer3, self.layer4 = stages
        self.head = nn.Linear(512, classes)

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        x = self.layer4(self.layer3(self.layer2(self.layer1(self.stem(x)))))
        return self.head(torch.flatten(nn.functional.adaptive_avg_pool2d(x, 1), 1))


SAMPLE = 24


def best_of(fn: Callable[[], object], repeats: int) -> float:
    """Shortest wall time of ``repeats`` calls (seconds)."""
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def main() -> None:
    torch.manual_seed(0)
    net = ResNet18Shape().eval()
    x = torch.randn(1, 3, 224, 224)
    patch, stride = 32, 16
    starts = positions(224, patch, stride)
    n = len(starts) ** 2

    def forward() -> None:
        with torch.no_grad():
            net(x)

    forward()  # warm-up
    t_fwd = best_of(forward, 3)
    print(f"forward pass, ResNet-18 shape, 224x224:   {t_fwd * 1e3:8.1f} ms")
    for layer in ("layer4", "layer1"):  # the earlier the layer, the longer the backward pass
        # Forward and Grad-CAM timed alternately so load from other processes hits both alike.
        pairs = [
            (best_of(forward, 1), best_of(lambda layer=layer: gradcam(net, x, 0, layer=layer), 1))
            for _ in range(4)
        ]
        t_f, t_cam = min(p[0] for p in pairs), min(p[1] for p in pairs)
        print(
            f"Grad-CAM ({layer}): {t_cam * 1e3:8.1f} ms, forward {t_f * 1e3:6.1f} ms, ratio {t_cam / t_f:5.2f} (goal <= 3.5)"
        )

    # The naive loop is timed on a sample of positions and scaled to all n (its cost is one forward
    # per position, so it grows linearly); this keeps the whole benchmark near a minute.
    spots = [(r, c) for r in starts for c in starts]
    sample = spots[:: max(1, n // SAMPLE)][:SAMPLE]

    def naive() -> None:
        with torch.no_grad():
            for r, c in sample:
                xo = x.clone()
                xo[:, :, r : r + patch, c : c + patch] = 0.0
                net(xo)

    def one_batch() -> None:
        with torch.no_grad():
            net(x.repeat(n, 1, 1, 1))

    t_naive = best_of(naive, 1) * n / len(sample)
    t_batch = best_of(one_batch, 1)
    t_occ = best_of(lambda: occlusion(net, x, 0, patch=patch, stride=stride, fill=0.0, batch_size=64), 1)
    print(f"occlusion, patch {patch}, stride {stride}: {n} positions")
    print(f"  naive loop, one forward per patch:      {t_naive:8.2f} s (timed on {len(sample)}, scaled)")
    print(f"  {n} forwards in one batch:              {t_batch:8.2f} s")
    print(f"  casefile occlusion (batch 64):          {t_occ:8.2f} s")
    print(f"  ratio to naive loop  {t_occ / t_naive:5.2f}   ratio to one batch  {t_occ / t_batch:5.2f}")
    print(f"threads: {torch.get_num_threads()}")


if __name__ == "__main__":
    main()
