"""Model room: load a classifier and its card, check they agree, and preprocess scans as the card says.

`load_model(model_path, card_path)` reads `model_path` by one rule:
  * "package.module:factory" (not an existing file): a Python entry point; the card's `weights` field
    names a state-dict file relative to the card; the digest is that file's SHA-256;
  * a ".pt2" file: a torch.export archive (unflattened so submodule names and hooks work);
  * a TorchScript file (torch.jit.save): loaded with torch.jit.load;
  * any other file: a state dict for the card's `entry_point` ("package.module:factory").
An entry point is imported only when the site (or the calling program) trusts it, and its factory is
called with the card's `entry_point_args` as keyword arguments (casefile.models.trust). A ".pt2"
archive is checked before and after torch reads it so that no code from it runs (casefile.models.archive).
A TorchScript file is a program: load it only from a source you trust.
A card may pin its weights (``weights_sha256``); then a model file with another SHA-256 is refused before
it is read (``pin_card`` writes the pin, casefile.models.pinning).
"""

from casefile.models.card import card_digest, check_card, read_card
from casefile.models.loading import LoadedModel, load_model, sha256_file
from casefile.models.pinning import PinResult, pin_card
from casefile.models.preprocess import BT601_LUMA

__all__ = ["BT601_LUMA", "LoadedModel", "PinResult", "card_digest", "check_card", "load_model", "pin_card",
           "read_card", "sha256_file"]
