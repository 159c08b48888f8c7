"""Incremental occlusion equals the naive method: one full forward pass per patch position.

Outside source: the reference in every test is the definition of occlusion sensitivity (Zeiler & Fergus
2014) computed directly, one ``torch`` forward pass of the whole model per covered image; torch's own
convolution, pooling and BatchNorm are the reference operators. The architectures follow the published
layouts in shape only (ResNet-18: He et al. 2016; dense blocks: Huang et al. 2017), with random weights.
The 1e-5 tolerance on probabilities is the issue's requirement.
"""

from __future__ import annotations

import numpy as np
import pytest
import torch
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from torch import nn

from casefile.explain.fields import Window
from casefile.explain.occlusion import occlusion, positions


def naive_grid(net: nn.Module, x: torch.Tensor, target: int, patch: int, stride: int, fill: float = 0.0):
    """Probability drops per position, one forward pass per covered image (the definition)."""
    _, _, h, w = x.shape
    ph, pw = min(patch, h), min(patch, w)
    rows, cols = positions(h, ph, stride), positions(w, pw, stride)
    with torch.no_grad():
        p0 = torch.softmax(net(x), 1)[0, target]
        out = np.empty((len(rows), len(cols)))
        for i, r in enumerate(rows):
            for j, c in enumerate(cols):
                xo = x.clone()
                xo[:, :, r : r + ph, c : c + pw] = fill
                out[i, j] = float(p0 - torch.softmax(net(xo), 1)[0, target])
    return out


def _randomise_bn(net: nn.Module, seed: int) -> nn.Module:
    g = torch.Generator().manual_seed(seed)
    for m in net.modules():
        if isinstance(m, nn.BatchNorm2d):
            m.running_mean.copy_(torch.rand(m.num_features, generator=g) * 0.4 - 0.2)
            m.running_var.copy_(torch.rand(m.num_features, generator=g) + 0.5)
    return net.eval()


def check_exact(net: nn.Module, x: torch.Tensor, patch: int, stride: int, fill: float = 0.0, target: int = 0):
    r = occlusion(net, x, target, patch=patch, stride=stride, fill=fill, mode="incremental", return_all=True)
    ref = naive_grid(net, x, target, patch, stride, fill)
    np.testing.assert_allclose(r.grid_probability, ref, atol=1e-5)
    return r


class Plain(nn.Module):
    def __init__(self) -> None:
        super().__init__()
        self.body = nn.Sequential(
            nn.Conv2d(3, 8, 3, 1, 1), nn.BatchNorm2d(8), nn.ReLU(), nn.Conv2d(8, 8, 5, 2, 2), nn.ReLU(),
            nn.MaxPool2d(2), nn.Conv2d(8, 12, 3, 1, 0), nn.LeakyReLU(0.1), nn.AvgPool2d(3, 2, 1),
        )
        self.head = nn.Linear(12, 3)

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        return self.head(self.body(x).mean(dim=(2, 3)))


class Block(nn.Module):
    def __init__(self, cin: int, cout: int, stride: int) -> None:
        super().__init__()
        self.conv1 = nn.Conv2d(cin, cout, 3, stride, 1, bias=False)
        self.bn1 = nn.BatchNorm2d(cout)
        self.conv2 = nn.Conv2d(cout, cout, 3, 1, 1, bias=False)
        self.bn2 = nn.BatchNorm2d(cout)
        self.relu = nn.ReLU(inplace=True)
        self.short = (nn.Sequential(nn.Conv2d(cin, cout, 1, stride, bias=False), nn.BatchNorm2d(cout))
                      if stride != 1 or cin != cout else nn.Identity())

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        y = self.relu(self.bn1(self.conv1(x)))
        y = self.bn2(self.conv2(y))
        y += self.short(x)
        return self.relu(y)


class SmallResNet18(nn.Module):
    """The ResNet-18 layout (stem 7x7/2 and 3x3/2 max pool, four stages of two blocks) at small widths."""

    def __init__(self, width: int = 8) -> None:
        super().__init__()
        self.stem = nn.Sequential(nn.Conv2d(3, width, 7, 2, 3, bias=False), nn.BatchNorm2d(width),
                                  nn.ReLU(inplace=True), nn.MaxPool2d(3, 2, 1))
        stages, cin = [], width
        for i, w in enumerate((width, 2 * width, 4 * width, 8 * width)):
            stages += [Block(cin, w, 1 if i == 0 else 2), Block(w, w, 1)]
            cin = w
        self.stages = nn.Sequential(*stages)
        self.pool = nn.AdaptiveAvgPool2d(1)
        self.fc = nn.Linear(cin, 4)

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        return self.fc(torch.flatten(self.pool(self.stages(self.stem(x))), 1))


class Dense(nn.Module):
    """Dense blocks: each layer's output concatenated to its input along the channels, then a transition."""

    def __init__(self) -> None:
        super().__init__()
        self.stem = nn.Conv2d(1, 6, 3, 1, 1)
        self.layers = nn.ModuleList(
            nn.Sequential(nn.BatchNorm2d(6 + 4 * i), nn.ReLU(), nn.Conv2d(6 + 4 * i, 4, 3, 1, 1)) for i in range(3))
        self.transition = nn.Sequential(nn.BatchNorm2d(18), nn.ReLU(), nn.Conv2d(18, 8, 1), nn.AvgPool2d(2, 2))
        self.fc = nn.Linear(8, 2)

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        x = self.stem(x)
        for layer in self.layers:
            x = torch.cat([x, layer(x)], 1)
        x = self.transition(x)
        return self.fc(nn.functional.adaptive_avg_pool2d(x, 1).flatten(1))


class DilatedGrouped(nn.Module):
    def __init__(self) -> None:
        super().__init__()
        self.a = nn.Conv2d(4, 8, 3, 1, 2, dilation=2, groups=2)
        self.b = nn.Conv2d(8, 8, 3, 2, 1, groups=8)  # depthwise
        self.c = nn.Conv2d(8, 6, (3, 5), (1, 2), (2, 1), dilation=(2, 1), groups=2)
        self.pool = nn.MaxPool2d(3, 2, 1, ceil_mode=True)
        self.fc = nn.Linear(6, 3)

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        x = torch.relu(self.a(x))
        x = nn.functional.silu(self.b(x))
        x = self.pool(torch.tanh(self.c(x)))
        return self.fc(x.mean(dim=(2, 3)))


def test_plain_stack_at_an_odd_size():
    torch.manual_seed(0)
    net = _randomise_bn(Plain(), 1)
    r = check_exact(net, torch.randn(1, 3, 37, 29), patch=7, stride=5)  # 5 divides neither 37-7 nor 29-7
    assert r.mode == "incremental" and r.exact and r.notes == []


def test_resnet18_shape_at_an_odd_size():
    torch.manual_seed(1)
    net = _randomise_bn(SmallResNet18(), 2)
    check_exact(net, torch.randn(1, 3, 75, 67), patch=16, stride=8, fill=0.5, target=2)


def test_dense_blocks_with_concatenation():
    torch.manual_seed(2)
    net = _randomise_bn(Dense(), 3)
    check_exact(net, torch.randn(1, 1, 23, 26), patch=5, stride=3, target=1)


def test_dilation_groups_and_ceil_mode_pooling():
    torch.manual_seed(3)
    check_exact(DilatedGrouped().eval(), torch.randn(1, 4, 31, 34), patch=6, stride=4)


def test_blurred_fill_is_exact_too():
    torch.manual_seed(4)
    net = _randomise_bn(Plain(), 5)
    x = torch.randn(1, 3, 30, 30)
    a = occlusion(net, x, 1, patch=8, stride=4, fill="blur", mode="incremental", return_all=True)
    b = occlusion(net, x, 1, patch=8, stride=4, fill="blur", mode="batched", return_all=True)
    np.testing.assert_allclose(a.grid_probability, b.grid_probability, atol=1e-5)
    np.testing.assert_allclose(a.logit, b.logit, atol=1e-4)


class Branchy(nn.Module):
    """Control flow on a tensor's value: torch.fx cannot trace it."""

    def __init__(self) -> None:
        super().__init__()
        self.conv = nn.Conv2d(1, 4, 3, 1, 1)
        self.fc = nn.Linear(4, 2)

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        y = torch.relu(self.conv(x))
        if y.sum() > 0:
            y = y * 2
        return self.fc(y.mean(dim=(2, 3)))


def test_a_model_that_cannot_be_traced_falls_back_and_says_so():
    torch.manual_seed(5)
    net = Branchy().eval()
    x = torch.randn(1, 1, 20, 20)
    r = check_exact(net, x, patch=6, stride=3)
    assert r.mode == "batched" and r.exact
    assert len(r.notes) == 1 and r.notes[0].startswith("plain method: the model could not be traced")


def test_approximate_modes_say_they_are_approximate():
    torch.manual_seed(6)
    net = _randomise_bn(SmallResNet18(), 7)
    x = torch.randn(1, 3, 64, 64)
    for mode in ("truncated", "coarse-to-fine"):
        r = occlusion(net, x, 0, patch=16, stride=8, mode=mode, return_all=True)
        assert r.mode == mode and r.exact is False and r.summary


@pytest.mark.parametrize(("kwargs", "words"), [
    ({"mode": "fast"}, "occlusion mode: 'fast' is not one of auto, incremental, batched"),
    ({"mode": "batched", "fidelity": 0.5}, "batched is exact and takes no fidelity"),
    ({"mode": "truncated", "fidelity": 0}, "occlusion fidelity: 0 is not a number above 0"),
    ({"mode": "truncated", "fidelity": 1.5}, "at most 1"),
])
def test_bad_mode_and_fidelity_are_refused(kwargs, words):
    from casefile.errors import ExplainError

    with pytest.raises(ExplainError, match=words):
        occlusion(Plain().eval(), torch.randn(1, 3, 20, 20), 0, patch=4, stride=4, **kwargs)


# --- random small architectures -------------------------------------------------------------------

@st.composite
def architectures(draw):
    size = draw(st.integers(9, 26)), draw(st.integers(9, 26))
    c = draw(st.integers(1, 3))
    layers, ch, hw = [], c, size
    for _ in range(draw(st.integers(1, 5))):
        kind = draw(st.sampled_from(["conv", "conv", "pool", "avg", "res", "cat", "act"]))
        if kind in ("conv", "pool", "avg"):
            k = draw(st.integers(1, 5))
            s = draw(st.integers(1, 3))
            p = draw(st.integers(0, k // 2))
            d = draw(st.integers(1, 2)) if kind != "avg" else 1
            w = Window(k, s, p, d)
            ceil = kind == "pool" and draw(st.booleans())
            new = (w.out_size(hw[0], ceil), w.out_size(hw[1], ceil))
            if min(new) < 1:
                continue
            if kind == "conv":
                groups = draw(st.sampled_from([g for g in (1, 2, 3) if ch % g == 0]))
                out = groups * draw(st.integers(1, 3))
                layers.append(nn.Conv2d(ch, out, k, s, p, dilation=d, groups=groups))
                ch = out
            elif kind == "pool":
                layers.append(nn.MaxPool2d(k, s, p, dilation=d, ceil_mode=ceil))
            else:
                layers.append(nn.AvgPool2d(k, s, p))
            hw = new
        elif kind == "res":
            layers.append(Residual(ch, draw(st.sampled_from([1, 3]))))
        elif kind == "cat":
            layers.append(Concat(ch, draw(st.integers(1, 3))))
            ch += layers[-1].extra
        else:
            layers.append(draw(st.sampled_from([nn.ReLU(), nn.BatchNorm2d(ch), nn.Sigmoid()])))
            if isinstance(layers[-1], nn.BatchNorm2d):
                _randomise_bn(layers[-1], draw(st.integers(0, 99)))
    patch = draw(st.integers(1, min(size) + 2))
    stride = draw(st.integers(1, max(1, min(patch, min(size)))))
    return size, c, layers, ch, patch, stride


class Residual(nn.Module):
    def __init__(self, ch: int, k: int) -> None:
        super().__init__()
        self.conv = nn.Conv2d(ch, ch, k, 1, k // 2)

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        return torch.relu(self.conv(x) + x)


class Concat(nn.Module):
    def __init__(self, ch: int, extra: int) -> None:
        super().__init__()
        self.extra = extra
        self.conv = nn.Conv2d(ch, extra, 3, 1, 1)

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        return torch.cat([x, self.conv(x)], dim=1)


class Stack(nn.Module):
    def __init__(self, layers: list[nn.Module], ch: int) -> None:
        super().__init__()
        self.body = nn.Sequential(*layers)
        self.fc = nn.Linear(ch, 3)

    def forward(self, x: torch.Tensor) -> torch.Tensor:
        return self.fc(torch.flatten(nn.functional.adaptive_avg_pool2d(self.body(x), 1), 1))


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(architectures(), st.integers(0, 2**16))
def test_random_architectures_and_patch_settings(arch, seed):
    size, c, layers, ch, patch, stride = arch
    ph, pw = min(patch, size[0]), min(patch, size[1])
    assume(not ((stride > ph and size[0] > ph) or (stride > pw and size[1] > pw)))
    torch.manual_seed(seed)
    net = Stack(layers, ch).eval()
    r = check_exact(net, torch.randn(1, c, *size), patch=patch, stride=stride)
    assert r.mode == "incremental" and r.notes == []


# --- torch.export archives: the same graph as operators ---------------------------------------------

@pytest.mark.parametrize("make, shape, patch, stride", [
    (lambda: _randomise_bn(Plain(), 11), (1, 3, 37, 29), 7, 5),
    (lambda: _randomise_bn(SmallResNet18(), 12), (1, 3, 75, 67), 16, 8),
    (lambda: _randomise_bn(Dense(), 13), (1, 1, 23, 26), 5, 3),
    (lambda: DilatedGrouped().eval(), (1, 4, 31, 34), 6, 4),
], ids=["plain", "resnet18", "dense", "dilated"])
def test_a_torch_export_graph_is_computed_incrementally_and_exactly(make, shape, patch, stride):
    torch.manual_seed(20)
    net = make()
    x = torch.randn(*shape)
    two = x.repeat(2, 1, 1, 1)
    ep = torch.export.export(net, (two,), dynamic_shapes=({0: torch.export.Dim("batch")},))
    r = check_exact(torch.export.unflatten(ep), x, patch=patch, stride=stride)  # as casefile loads a .pt2
    assert r.mode == "incremental" and r.notes == []
    assert r.work_share is not None and r.work_share < 0.95  # windows did the work, not full maps


def test_work_share_of_a_plain_module_is_below_one():
    torch.manual_seed(21)
    r = check_exact(_randomise_bn(SmallResNet18(), 22), torch.randn(1, 3, 64, 64), patch=8, stride=8)
    assert 0 < r.work_share < 0.8


def test_auto_computes_incrementally_only_for_a_model_big_enough_to_gain(monkeypatch):
    import importlib

    occ = importlib.import_module("casefile.explain.occlusion")  # the module (the package exports the function)
    torch.manual_seed(23)
    net, x = _randomise_bn(Plain(), 24), torch.randn(1, 3, 30, 30)
    small = occlusion(net, x, 0, patch=6, stride=3, return_all=True)  # default mode: auto
    assert small.mode == "batched" and small.exact
    assert "million multiply-adds per image, too few for windows to save time (from 100 million)" in small.notes[0]
    monkeypatch.setattr(occ, "AUTO_MIN_MACS", 1)
    big = occlusion(net, x, 0, patch=6, stride=3, return_all=True)
    assert big.mode == "incremental" and big.notes == []
    np.testing.assert_allclose(big.grid_probability, small.grid_probability, atol=1e-5)
