"""Tiny models trained on generated pictures (blob left/right, corner marker) for the explanation tests."""

from __future__ import annotations

from functools import cache

import numpy as np
import pytest
import torch
from torch import nn

SIZE = 32


class TinyNet(nn.Module):
    """Two convolutions, BatchNorm, then either a flatten + linear head or global-average-pool + linear."""

    def __init__(self, channels: int = 1, classes: int = 2, gap: bool = True) -> None:
        super().__init__()
        self.features = nn.Sequential(
            nn.Conv2d(channels, 8, 3, padding=1),
            nn.BatchNorm2d(8),
            nn.ReLU(),
            nn.MaxPool2d(2),
            nn.Conv2d(8, 16, 3, padding=1, bias=False),
            nn.ReLU(inplace=True),
        )
        self.gap = gap
        self.pool = nn.AdaptiveAvgPool2d(1) if gap else nn.MaxPool2d(2)
        self.head = nn.Linear(16 if gap else 16 * (SIZE // 4) ** 2, classes)

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        return self.head(torch.flatten(self.pool(self.features(x)), 1))


def bar(row: float, col: float, upright: int) -> np.ndarray:
    """A bright elongated Gaussian bar of height 1 centred at (row, col), upright or lying."""
    yy, xx = np.mgrid[0:SIZE, 0:SIZE]
    sr, sc = (3.0, 1.2) if upright else (1.2, 3.0)
    return np.exp(-((yy - row) ** 2 / (2 * sr**2) + (xx - col) ** 2 / (2 * sc**2)))


def picture(rng: np.random.Generator, upright: int, marker: bool, channels: int = 1) -> np.ndarray:
    """Noise, an upright (1) or lying (0) bar near the centre, and an optional 4x4 chequered marker in a corner."""
    img = 0.05 * rng.standard_normal((SIZE, SIZE))
    img += bar(16 + rng.uniform(-3, 3), 16 + rng.uniform(-3, 3), upright)
    if marker:
        img[0:4, 0:4] = 1.5 * CHECKER
    return np.repeat(img[None], channels, axis=0).astype(np.float32)


CHECKER = np.where((np.arange(4)[:, None] + np.arange(4)[None, :]) % 2 == 0, 1.0, -1.0)

# The region of interest of these pictures: the centre holding the bar (the marker lies outside).
ROI = np.zeros((SIZE, SIZE), dtype=bool)
ROI[4:28, 4:28] = True


def make_set(seed: int, n: int, rule: str) -> tuple[torch.Tensor, torch.Tensor]:
    """``rule`` "object": label = bar upright, never a marker; "marker": label = marker present, bar random."""
    rng = np.random.default_rng(seed)
    xs, ys = [], []
    for _ in range(n):
        upright, marker = int(rng.integers(2)), rule == "marker" and bool(rng.integers(2))
        xs.append(picture(rng, upright, marker))
        ys.append(upright if rule == "object" else int(marker))
    return torch.from_numpy(np.stack(xs)), torch.tensor(ys)


@cache  # one training per rule for the whole run, shared by the module fixtures
def train(rule: str, seed: int = 0, epochs: int = 8) -> TinyNet:
    """Train a TinyNet for a few seconds on 256 generated pictures (seeded, so the same every run)."""
    torch.manual_seed(seed)
    net = TinyNet()
    x, y = make_set(seed, 256, rule)
    opt = torch.optim.Adam(net.parameters(), lr=1e-2)
    threads = torch.get_num_threads()
    torch.set_num_threads(1)  # tiny batches: one thread is faster than two fighting other processes
    try:
        net.train()
        for _ in range(epochs):
            perm = torch.randperm(len(x))
            for i in range(0, len(x), 32):
                idx = perm[i : i + 32]
                opt.zero_grad()
                nn.functional.cross_entropy(net(x[idx]), y[idx]).backward()
                opt.step()
    finally:
        torch.set_num_threads(threads)
    net.eval()
    for p in net.parameters():
        p.grad = None
    return net


@pytest.fixture(scope="module")
def object_net() -> TinyNet:
    return train("object")


@pytest.fixture(scope="module")
def marker_net() -> TinyNet:
    return train("marker")


@pytest.fixture
def test_picture() -> torch.Tensor:
    """A held-out picture with an upright bar and no marker."""
    rng = np.random.default_rng(1234)
    return torch.from_numpy(picture(rng, 1, False))[None]
