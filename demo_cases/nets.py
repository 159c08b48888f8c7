"""TinyNet: a small convolutional classifier for the demo radiographs (CPU, well under 50k parameters)."""

from __future__ import annotations

from torch import Tensor, nn


def _conv(cin: int, cout: int) -> list[nn.Module]:
    return [nn.Conv2d(cin, cout, 3, padding=1, bias=False), nn.BatchNorm2d(cout), nn.ReLU()]


class TinyNet(nn.Module):
    """Three conv blocks (BatchNorm + ReLU), global average pool, linear head.

    For a 64x64 input the feature maps are 64x64 (block1), 32x32 (block2) and 16x16 (block3);
    `features.block3` is the last convolutional map, the usual Grad-CAM layer.
    """

    def __init__(self, in_channels: int = 1, n_classes: int = 4, width: int = 8) -> None:
        super().__init__()
        w = width
        self.features = nn.Sequential()
        self.features.add_module("block1", nn.Sequential(*_conv(in_channels, w)))
        self.features.add_module("block2", nn.Sequential(nn.MaxPool2d(2), *_conv(w, 2 * w)))
        self.features.add_module("block3", nn.Sequential(nn.MaxPool2d(2), *_conv(2 * w, 4 * w), *_conv(4 * w, 4 * w)))
        self.pool = nn.AdaptiveAvgPool2d(1)
        self.head = nn.Linear(4 * w, n_classes)

    def forward(self, x: Tensor) -> Tensor:
        return self.head(self.pool(self.features(x)).flatten(1))


def tiny_net(in_channels: int = 1, n_classes: int = 4, width: int = 8) -> TinyNet:
    """Entry-point factory: `demo_cases.nets:tiny_net` (untrained; weights come from a state dict)."""
    return TinyNet(in_channels=in_channels, n_classes=n_classes, width=width)
