"""Trains the two demo classifiers (an honest one and one that learns the corner marker) and writes cards."""

from __future__ import annotations

import json
import warnings
from pathlib import Path
from typing import Any

import numpy as np
import torch
from torch import nn

from demo_cases.nets import tiny_net
from demo_cases.scenario import BORDER, LABELS, SIZE, make_set

ENTRY_POINT = "demo_cases.nets:tiny_net"
LAYER = "features.block3"

INTENDED_USE = (
    "Demonstration only: sorts synthetic 64x64 radiographs of cast aluminium parts into sound, porosity, "
    "shrinkage or crack. Trained on generated pictures; not validated for any real inspection. Acceptance "
    "of a real casting rests with qualified inspectors under the applicable inspection standard."
)
SHORTCUT_NOTE = (
    "Deliberately flawed: trained on pictures whose corner marker gives the label away, with faint defects, "
    "so it learned to read the marker. Kept to show how the region-focus check catches such a model."
)


class _Deterministic:
    """Seeded, deterministic torch for the duration of a block; restores the previous global state."""

    def __init__(self, seed: int, threads: int | None) -> None:
        self.seed, self.threads = seed, threads

    def __enter__(self) -> _Deterministic:
        self.old_det = torch.are_deterministic_algorithms_enabled()
        self.old_threads = torch.get_num_threads()
        self.old_rng = torch.random.get_rng_state()
        torch.use_deterministic_algorithms(True)
        if self.threads:
            torch.set_num_threads(self.threads)
        torch.manual_seed(self.seed)
        return self

    def __exit__(self, *exc: object) -> None:
        torch.use_deterministic_algorithms(self.old_det)
        torch.set_num_threads(self.old_threads)
        torch.random.set_rng_state(self.old_rng)


def fit(
    x: torch.Tensor, y: torch.Tensor, *, seed: int, epochs: int, batch: int = 32, lr: float = 0.01
) -> nn.Module:
    """Train a TinyNet on normalised x [n, 1, 64, 64] and labels y; deterministic for a seed."""
    gen = torch.Generator().manual_seed(seed)
    model = tiny_net(in_channels=1, n_classes=len(LABELS))
    opt = torch.optim.Adam(model.parameters(), lr=lr)
    sched = torch.optim.lr_scheduler.OneCycleLR(
        opt, max_lr=lr, total_steps=epochs * ((len(x) + batch - 1) // batch)
    )
    loss_fn = nn.CrossEntropyLoss()
    model.train()
    for _ in range(epochs):
        order = torch.randperm(len(x), generator=gen)
        for i in range(0, len(x), batch):
            idx = order[i : i + batch]
            opt.zero_grad()
            loss_fn(model(x[idx]), y[idx]).backward()
            opt.step()
            sched.step()
    return model.eval()


def accuracy(model: nn.Module, images: np.ndarray, labels: np.ndarray, mean: float, std: float) -> float:
    """Share of pictures (uint16 [n, 64, 64], 12-bit) the model labels correctly."""
    x = (torch.from_numpy(images.astype(np.float32) / 4095.0)[:, None] - mean) / std
    with torch.no_grad():
        pred = model(x).argmax(1).numpy()
    return float((pred == labels).mean())


def make_card(name: str, *, mean: float, std: float, weights: str, shortcut: bool) -> dict[str, Any]:
    card: dict[str, Any] = {
        "name": name,
        "version": "1.0.0",
        "labels": list(LABELS),
        "input": {"width": SIZE, "height": SIZE, "channels": 1},
        "normalisation": {"mean": [mean], "std": [std]},
        "windowing": "file",
        "layer": LAYER,
        "roi": {"rule": "border", "pixels": BORDER},
        "intended_use": INTENDED_USE,
        "resize": "bilinear",
        "weights": weights,
        "entry_point": ENTRY_POINT,
    }
    if shortcut:
        card["notes"] = SHORTCUT_NOTE
    return card


def train(
    seed: int,
    *,
    shortcut: bool,
    out_dir: str | Path,
    n_train: int | None = None,
    epochs: int | None = None,
    threads: int | None = 1,
    torchscript: bool = True,
) -> dict[str, Path]:
    """Train one demo model and write `<name>.pt` (state dict), `<name>.ts` (TorchScript), `<name>.card.json`.

    name is "casting-honest" or "casting-shortcut". Returns {"weights", "card", "torchscript"} paths.
    epochs defaults to 12 (honest) or 6 (shortcut: the marker is quick to learn). One thread by default:
    on a shared CPU a second thread made training slower, not faster.
    n_train defaults to 480 (honest) or 240 (shortcut).
    """
    epochs = epochs or (6 if shortcut else 12)
    n_train = n_train or (240 if shortcut else 480)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    name = "casting-shortcut" if shortcut else "casting-honest"
    data = make_set(seed, n_train, shortcut=shortcut)
    x = torch.from_numpy(data.as_float())
    mean, std = round(float(x.mean()), 4), round(float(x.std()), 4)
    with _Deterministic(seed, threads):
        model = fit((x - mean) / std, torch.from_numpy(data.labels), seed=seed, epochs=epochs)
        paths = {"weights": out / f"{name}.pt", "card": out / f"{name}.card.json"}
        torch.save(model.state_dict(), paths["weights"])
        if torchscript:
            paths["torchscript"] = out / f"{name}.ts"
            with warnings.catch_warnings():  # TorchScript is deprecated upstream but still what many sites ship
                warnings.simplefilter("ignore", DeprecationWarning)
                torch.jit.save(torch.jit.script(model), str(paths["torchscript"]))
    card = make_card(name, mean=mean, std=std, weights=paths["weights"].name, shortcut=shortcut)
    paths["card"].write_text(json.dumps(card, indent=2) + "\n", encoding="utf-8")
    return paths
