"""Pinning a card to its weights: write the SHA-256 of a model file into the card as ``weights_sha256``.

Once pinned, ``load_model`` refuses any other model file with that card, so a case can never be
recorded under the wrong model's name. The card file is rewritten whole (casefile.files.write_atomic),
keeping its key order, indentation and permissions as far as JSON allows.
"""

from __future__ import annotations

import json
import re
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from casefile.errors import ModelError
from casefile.files import write_atomic
from casefile.models.card import check_card, read_card
from casefile.models.loading import load_with_card, sha256_file, weights_file

PIN = "weights_sha256"
_INDENT = re.compile(r'^([ \t]+)"', re.MULTILINE)


@dataclass(frozen=True)
class PinResult:
    """What ``pin_card`` did: the digest now pinned, the one before (if any), and whether the file changed."""

    card: Path
    model_file: str
    digest: str
    previous: str | None
    changed: bool

    def words(self) -> str:
        if not self.changed:
            return f"{self.card.name} already pins {self.model_file} (SHA-256 {self.digest}); nothing changed"
        was = f", replacing {self.previous}" if self.previous else ""
        return f"{self.card.name} now pins {self.model_file}: weights_sha256 {self.digest}{was}"

    def to_dict(self) -> dict[str, Any]:
        return {"card": str(self.card), "model_file": self.model_file, "weights_sha256": self.digest,
                "previous": self.previous, "changed": self.changed}


def _layout(text: str) -> dict[str, Any]:
    """json.dumps arguments that give back the layout of ``text`` (indent, escapes) as far as JSON allows."""
    found = _INDENT.search(text)
    indent: str | int | None = None
    if found:
        ws = found.group(1)
        indent = len(ws) if set(ws) == {" "} else ws
    return {"indent": indent, "ensure_ascii": "\\u" in text}


def _with_pin(card: dict[str, Any], digest: str) -> dict[str, Any]:
    """The card with ``weights_sha256`` set: in place of an old pin, else right after ``weights``, else last."""
    if PIN in card:
        return {k: (digest if k == PIN else v) for k, v in card.items()}
    out: dict[str, Any] = {}
    for k, v in card.items():
        out[k] = v
        if k == "weights":
            out[PIN] = digest
    out.setdefault(PIN, digest)
    return out


def pin_card(card_path: str | Path, model_path: str | Path, *, replace: bool = False,
             trusted_entry_points: str | Iterable[str] | None = None) -> PinResult:
    """Write the SHA-256 of ``model_path`` (as ``load_model`` reads it) into the card at ``card_path``.

    The model is first loaded with the card (its pin set aside) so only weights the card really
    describes are pinned: outputs per label, the layer, a forward pass. A card that already pins other
    weights is refused unless ``replace``. Refusals are one-line ModelErrors; the card is then unchanged.
    """
    card_file = Path(card_path)
    card = read_card(card_file)
    text = card_file.read_text(encoding="utf-8")
    path, _how = weights_file(model_path, card, card_file)
    digest = sha256_file(path)
    previous = card.get(PIN)
    previous = previous.lower() if isinstance(previous, str) else None
    if previous == digest:
        return PinResult(card_file, path.name, digest, previous, changed=False)
    if previous is not None and not replace:
        raise ModelError(f"{card_file.name}: already pins weights_sha256 {previous}, not {path.name}'s {digest}; "
                         "pin the new weights with --replace (replace=True) only if this card now describes them")
    unpinned = {k: v for k, v in card.items() if k != PIN}
    load_with_card(model_path, unpinned, card_file, trusted_entry_points)  # refuses weights that do not fit
    new = _with_pin(card, digest)
    out = json.dumps(new, **_layout(text))
    if text.endswith("\n"):
        out += "\n"
    check_card(json.loads(out), card_file.name)
    write_atomic(card_file, out.encode("utf-8"))
    return PinResult(card_file, path.name, digest, previous, changed=True)
