"""Loads a classifier (TorchScript, torch.export archive or Python entry point + state dict) with its card.

One rule decides how `model_path` is read (documented in casefile.models):
  1. "package.module:factory" that is not an existing file -> entry point; the card's `weights`
     (a state-dict file, relative to the card) is loaded into factory(**entry_point_args);
  2. a file ending in ".pt2" -> torch.export archive (torch.export.load, then torch.export.unflatten so
     submodules keep their names and forward hooks fire);
  3. any other file holding TorchScript code -> torch.jit.load;
  4. any other file -> a state dict for the card's `entry_point`.
Everything is loaded with map_location="cpu"; state dicts with weights_only=True.
"""

from __future__ import annotations

import warnings
import zipfile
from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import torch
from torch import nn

from casefile.errors import ModelError, one_line
from casefile.files import sha256_file
from casefile.models.archive import check_expansion, check_export_archive, check_export_graph
from casefile.models.card import card_digest, read_card
from casefile.models.preprocess import preprocess_pixels, roi_mask, rules_record
from casefile.models.trust import ENTRY_POINT, build_module, trusted_names

ONE_AT_A_TIME = ("the model takes one image at a time (its output batch does not follow the input batch): "
                 "occlusion and the checks ran in batches of one")


@dataclass(frozen=True)
class LoadedModel:
    """A model ready for inference and explanation, with the card it was checked against."""

    module: nn.Module
    card: dict[str, Any]
    digest: str
    card_digest: str
    labels: list[str]
    layer: str
    source: dict[str, Any] = field(default_factory=dict)
    notes: tuple[str, ...] = ()
    weights_pinned: bool = False  # the card's weights_sha256 named exactly these weights
    card_name: str = "card"  # the card file's base name, for messages

    @property
    def fixed_batch(self) -> bool:
        """The model takes one image at a time (probed with a batch of two when it was loaded)."""
        return ONE_AT_A_TIME in self.notes

    @property
    def name(self) -> str:
        return str(self.card["name"])

    @property
    def version(self) -> str:
        return str(self.card["version"])

    @property
    def window(self) -> str | dict[str, Any]:
        """The card's windowing rule, in the form casefile.imaging.load(window=...) takes."""
        return self.card["windowing"]

    def preprocess(self, scan: Any) -> torch.Tensor:
        """Scan (or [C, H, W] 0..1 array) -> Tensor[1, C, H, W] float32 as the card says."""
        return preprocess_pixels(scan, self.card)[0]

    def preprocessing_record(self, scan: Any = None) -> dict[str, Any]:
        """The rules applied to every scan; with a scan, also the steps that applied to that scan."""
        record = rules_record(self.card)
        if scan is not None:
            record["applied"] = preprocess_pixels(scan, self.card)[1]
        return record

    def roi_mask(self, h: int, w: int) -> np.ndarray | None:
        return roi_mask(self.card, h, w)


def _is_torchscript(path: Path) -> bool:
    try:
        with zipfile.ZipFile(path) as z:
            names = z.namelist()
    except (zipfile.BadZipFile, OSError):
        return False
    return any(n.split("/", 1)[-1].startswith("code/") for n in names) or any(
        n.endswith("/constants.pkl") for n in names
    )


def _from_entry_point(entry_point: str, weights: Path, card: dict[str, Any], card_name: str,
                      trusted: tuple[str, ...]) -> nn.Module:
    module = build_module(entry_point, card.get("entry_point_args", {}), trusted, card_name)
    try:
        state = torch.load(weights, map_location="cpu", weights_only=True)
    except Exception as exc:
        hint = "; a pickled whole module is refused, save module.state_dict() instead" if (
            "weights_only" in str(exc) or "Unsupported global" in str(exc)) else ""
        raise ModelError(f"{weights.name}: not a loadable state dict ({type(exc).__name__}){hint}") from None
    if not isinstance(state, dict) or not all(isinstance(v, torch.Tensor) for v in state.values()):
        raise ModelError(f"{weights.name}: not a state dict (a mapping of names to tensors)")
    try:
        module.load_state_dict(state, strict=True)
    except RuntimeError as exc:
        first = str(exc).splitlines()[1:2] or [str(exc)]
        raise ModelError(
            f"{weights.name}: state dict does not fit {entry_point}: {first[0].strip()}"
        ) from None
    return module


def weights_file(model_path: str | Path, card: dict[str, Any], card_file: Path) -> tuple[Path, str]:
    """The file whose bytes are the model's weights, and how it is read (the rule in the module docstring):
    ("entry-point", the card's ``weights``), ("torch.export", a .pt2), or ("file", TorchScript or a state
    dict, told apart when it is loaded). Its SHA-256 is the model digest every record carries."""
    text = str(model_path)
    path = Path(model_path)
    if ENTRY_POINT.match(text) and not path.exists():
        if "weights" not in card:
            raise ModelError(f"{card_file.name}: entry point {text} needs a 'weights' state-dict file in the card")
        weights = card_file.parent / card["weights"]
        if not weights.is_file():
            raise ModelError(f"{weights.name}: state-dict file not found at {weights} (named by {card_file.name})")
        return weights, "entry-point"
    if not path.is_file():
        raise ModelError(f"{path.name}: model file not found at {path}")
    return path, "torch.export" if path.suffix == ".pt2" else "file"


def check_pin(card: dict[str, Any], card_name: str, file_name: str, digest: str) -> bool:
    """True when the card pins the weights and ``digest`` is that pin; False when the card pins nothing.

    A different digest is refused in one line naming both, before torch reads a byte of the file.
    """
    want = card.get("weights_sha256")
    if want is None:
        return False
    if want.lower() != digest:
        raise ModelError(f"{file_name}: SHA-256 {digest} does not match the card {card_name}'s weights_sha256 "
                         f"{want.lower()}; this is not the model the card describes")
    return True


def _load_module(model_path: str | Path, card: dict[str, Any], card_file: Path, trusted: str | Iterable[str] | None,
                 ) -> tuple[nn.Module, str, dict, bool]:
    card_name = card_file.name
    path, how = weights_file(model_path, card, card_file)
    digest = sha256_file(path)
    pinned = check_pin(card, card_name, path.name, digest)
    check_expansion(path)
    if how == "entry-point":
        module = _from_entry_point(str(model_path), path, card, card_name, trusted_names(trusted))
        return module, digest, {"format": "entry-point", "entry_point": str(model_path),
                                "file_name": path.name}, pinned
    if how == "torch.export":
        check_export_archive(path)
        try:
            program = torch.export.load(str(path))
        except Exception as exc:
            raise ModelError(f"{path.name}: not a readable torch.export archive ({type(exc).__name__})") from None
        check_export_graph(program, path.name)
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                module = torch.export.unflatten(program)
        except Exception as exc:
            raise ModelError(f"{path.name}: torch.export archive cannot be unflattened ({type(exc).__name__})") from None
        return module, digest, {"format": "torch.export", "file_name": path.name}, pinned
    if _is_torchscript(path):
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", DeprecationWarning)
                module = torch.jit.load(str(path), map_location="cpu")
        except Exception as exc:
            raise ModelError(f"{path.name}: not a readable TorchScript file ({type(exc).__name__})") from None
        return module, digest, {"format": "torchscript", "file_name": path.name}, pinned
    if "entry_point" not in card:
        raise ModelError(
            f"{path.name}: not TorchScript or a .pt2 archive; a state dict needs 'entry_point' in {card_name}"
        )
    module = _from_entry_point(card["entry_point"], path, card, card_name, trusted_names(trusted))
    return module, digest, {"format": "entry-point", "entry_point": card["entry_point"],
                            "file_name": path.name}, pinned


def check_against_card(module: nn.Module, card: dict[str, Any], card_name: str) -> tuple[str, ...]:
    """Dummy forward on zeros of the card's input shape; refuse any mismatch. Returns notes."""
    notes: list[str] = []
    layer = card["layer"]
    modules = dict(module.named_modules())
    if layer not in modules:
        near = [n for n in modules if n and (n.startswith(layer.rsplit(".", 1)[0]) or layer in n)][:5]
        hint = f" (names nearby: {', '.join(near)})" if near else ""
        raise ModelError(f"{card_name}: card names layer {layer!r} but the model has no module by that name{hint}")
    spec = card["input"]
    x = torch.zeros(1, spec["channels"], spec["height"], spec["width"])
    seen: list[Any] = []
    handle = None
    if isinstance(module, torch.jit.ScriptModule):
        notes.append(f"layer {layer} output shape not checked: TorchScript modules do not allow forward hooks")
    else:
        handle = modules[layer].register_forward_hook(lambda _m, _i, out: seen.append(out))
    try:
        with torch.no_grad():
            out = module(x)
    except Exception as exc:
        shape = f"[1, {spec['channels']}, {spec['height']}, {spec['width']}]"
        msg = one_line(exc, last=True)
        raise ModelError(f"{card_name}: the model fails on a {shape} input as the card describes: {msg}") from None
    finally:
        if handle is not None:
            handle.remove()
    if not isinstance(out, torch.Tensor):
        raise ModelError(f"{card_name}: the model returns {type(out).__name__}, not one tensor of scores")
    n = len(card["labels"])
    if out.ndim != 2 or out.shape[0] != 1:
        raise ModelError(f"{card_name}: the model gives output of shape {list(out.shape)}, expected [1, {n}]")
    if out.shape[1] != n:
        raise ModelError(f"{card_name}: card lists {n} labels but the model gives {out.shape[1]} outputs")
    if not torch.isfinite(out).all():
        raise ModelError(f"{card_name}: the model gives NaN or infinite scores on a zero input")
    if handle is not None:
        if not seen:
            raise ModelError(f"{card_name}: layer {layer!r} is never run by the model's forward")
        feat = seen[-1]
        if not isinstance(feat, torch.Tensor) or feat.ndim != 4:
            shape = list(feat.shape) if isinstance(feat, torch.Tensor) else type(feat).__name__
            raise ModelError(f"{card_name}: layer {layer!r} gives {shape}, not a 4-D [N, C, H, W] feature map")
    if not takes_batches(module, x):
        notes.append(ONE_AT_A_TIME)
    return tuple(notes)


def takes_batches(module: nn.Module, x: torch.Tensor) -> bool:
    """True when a batch of two gives two rows of scores; False for a model fixed at a batch of one
    (exported with a static batch, or whose output batch does not follow the input batch)."""
    try:
        with torch.no_grad():
            out = module(torch.cat([x, x]))
    except Exception:  # any refusal of a batch of two is what this probe asks about
        return False
    return isinstance(out, torch.Tensor) and out.ndim == 2 and out.shape[0] == 2


def load_model(model_path: str | Path, card_path: str | Path, *,
               trusted_entry_points: str | Iterable[str] | None = None) -> LoadedModel:
    """Load a model and its card, check they agree, and return a LoadedModel (module in eval mode).

    An entry point (the card's ``entry_point`` with a state-dict file, or ``model_path`` given as
    ``"package.module:factory"``) is imported only when trusted: by the site settings, or by
    ``trusted_entry_points`` from the calling program (names as in the site settings: a package, a
    module, or ``"module:factory"``; added to the site's). See casefile.models.trust.

    When the card pins its weights (``weights_sha256``), a model file with another SHA-256 is refused
    before torch reads it; ``LoadedModel.weights_pinned`` says whether the card pinned them.
    """
    card_file = Path(card_path)
    return load_with_card(model_path, read_card(card_file), card_file, trusted_entry_points)


def load_with_card(model_path: str | Path, card: dict[str, Any], card_file: Path,
                   trusted_entry_points: str | Iterable[str] | None = None) -> LoadedModel:
    """``load_model`` for a card already read and checked (``card_file`` is where it came from: its
    folder anchors the card's ``weights``, its name goes into messages)."""
    module, digest, source, pinned = _load_module(model_path, card, card_file, trusted_entry_points)
    module.eval()
    notes = check_against_card(module, card, card_file.name)
    return LoadedModel(
        module=module,
        card=card,
        digest=digest,
        card_digest=card_digest(card),
        labels=list(card["labels"]),
        layer=card["layer"],
        source=source,
        notes=notes,
        weights_pinned=pinned,
        card_name=card_file.name,
    )
