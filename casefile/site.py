"""Site settings kept outside the ledger and outside any model card: what this site trusts and its limits.

A model card and a seal file arrive with the data; what may be believed about them is decided here,
by whoever runs casefile at the site. Settings come from, in order of precedence:

1. environment variables (``CASEFILE_TRUSTED_ENTRY_POINTS``, ``CASEFILE_TRUSTED_KEYS``,
   ``CASEFILE_MAX_PIXELS``, ``CASEFILE_MAX_FILE_PIXELS``);
2. the site file ``site.json`` in the configuration folder (``$CASEFILE_CONFIG_DIR``, else
   ``~/.config/casefile``, the folder that also holds the site key);
3. the defaults below.

The site file is a JSON object; every key is optional::

    {
      "trusted_entry_points": ["mypkg.nets"],          # modules (or packages) whose factories may build models
      "trusted_keys": ["/etc/casefile/seal-2026.pub"],  # Ed25519 public keys (PEM files, or 64 hex digits)
      "max_pixels": 100000000,                          # per frame, checked from the header before decoding
      "max_file_pixels": 400000000                      # per file, all frames together
    }

Relative paths in the file are read relative to the file's folder. An unknown key or a wrong type is
refused with one line naming the file and the key: a typo in a trust setting must not pass silently.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from casefile.errors import CasefileError

CONFIG_DIR_ENV = "CASEFILE_CONFIG_DIR"
DEFAULT_CONFIG_DIR = Path("~/.config/casefile")
SITE_FILE = "site.json"
ENTRY_POINTS_ENV = "CASEFILE_TRUSTED_ENTRY_POINTS"
KEYS_ENV = "CASEFILE_TRUSTED_KEYS"
MAX_PIXELS_ENV = "CASEFILE_MAX_PIXELS"
MAX_FILE_PIXELS_ENV = "CASEFILE_MAX_FILE_PIXELS"

# 100 megapixels per frame: a 14-bit 43 x 43 cm flat-panel radiograph at 0.1 mm is about 18.5 MP and a
# full-field digital mammogram about 30 MP (common practice, figures from memory); a whole-slide image is
# out of scope for a classifier that takes one picture. Four such frames per file.
DEFAULT_MAX_PIXELS = 100_000_000
DEFAULT_MAX_FILE_PIXELS = 400_000_000

_KEYS = {"trusted_entry_points": list, "trusted_keys": list, "max_pixels": int, "max_file_pixels": int}


class SiteError(CasefileError):
    """The site settings cannot be read or are malformed."""


@dataclass(frozen=True)
class SiteSettings:
    """What this site trusts and the limits it sets; see the module docstring for where each comes from."""

    trusted_entry_points: tuple[str, ...] = ()
    trusted_keys: tuple[str, ...] = ()  # PEM file paths or 64-hex raw Ed25519 public keys
    max_pixels: int = DEFAULT_MAX_PIXELS
    max_file_pixels: int = DEFAULT_MAX_FILE_PIXELS
    source: str = "defaults"  # where the settings were read from, for messages


def config_dir() -> Path:
    """The configuration folder: ``$CASEFILE_CONFIG_DIR``, else ``~/.config/casefile``."""
    env = os.environ.get(CONFIG_DIR_ENV)
    return Path(env).expanduser() if env else DEFAULT_CONFIG_DIR.expanduser()


def _positive(value: Any, where: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or value < 1:
        raise SiteError(f"{where}: expected a whole number of at least 1, got {value!r}")
    return value


def _strings(value: list[Any], where: str) -> tuple[str, ...]:
    if not all(isinstance(v, str) and v.strip() for v in value):
        raise SiteError(f"{where}: expected a list of non-empty strings")
    return tuple(v.strip() for v in value)


def _read_file(path: Path) -> dict[str, Any]:
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        return {}
    except (OSError, UnicodeDecodeError) as exc:
        raise SiteError(f"{path}: site settings cannot be read ({exc})") from None
    except json.JSONDecodeError as exc:
        raise SiteError(f"{path}: site settings are not valid JSON (line {exc.lineno}: {exc.msg})") from None
    except RecursionError:
        raise SiteError(f"{path}: site settings nest too deeply to be read") from None
    if not isinstance(data, dict):
        raise SiteError(f"{path}: site settings must be a JSON object")
    for key, value in data.items():
        if key not in _KEYS:
            raise SiteError(f"{path}: unknown setting {key!r}; known settings: {', '.join(_KEYS)}")
        if not isinstance(value, _KEYS[key]) or isinstance(value, bool):
            kind = "list" if _KEYS[key] is list else "whole number"
            raise SiteError(f"{path}: setting {key!r} must be a {kind}")
    return data


def _resolve_key(entry: str, base: Path) -> str:
    """A raw hex key stays as it is; a relative file path is taken relative to ``base``."""
    if len(entry) == 64 and all(c in "0123456789abcdef" for c in entry):
        return entry
    p = Path(entry).expanduser()
    return str(p if p.is_absolute() else base / p)


def load_site_settings(path: str | os.PathLike[str] | None = None) -> SiteSettings:
    """Read the site settings (``path`` names a site file; default ``<config dir>/site.json``)."""
    file = Path(path).expanduser() if path is not None else config_dir() / SITE_FILE
    data = _read_file(file)
    sources = [str(file)] if data else []
    entry_points = _strings(data.get("trusted_entry_points", []), f"{file}: trusted_entry_points")
    keys = tuple(_resolve_key(k, file.parent)
                 for k in _strings(data.get("trusted_keys", []), f"{file}: trusted_keys"))
    max_pixels = _positive(data.get("max_pixels", DEFAULT_MAX_PIXELS), f"{file}: max_pixels")
    max_file = _positive(data.get("max_file_pixels", DEFAULT_MAX_FILE_PIXELS), f"{file}: max_file_pixels")
    env = os.environ
    if env.get(ENTRY_POINTS_ENV):
        entry_points = tuple(p.strip() for p in env[ENTRY_POINTS_ENV].split(",") if p.strip())
        sources.append(f"${ENTRY_POINTS_ENV}")
    if env.get(KEYS_ENV):
        keys = tuple(_resolve_key(p.strip(), Path.cwd()) for p in env[KEYS_ENV].split(os.pathsep) if p.strip())
        sources.append(f"${KEYS_ENV}")
    for name, current in ((MAX_PIXELS_ENV, "max_pixels"), (MAX_FILE_PIXELS_ENV, "max_file_pixels")):
        if env.get(name):
            try:
                value = _positive(int(env[name]), f"${name}")
            except ValueError:
                raise SiteError(f"${name}: expected a whole number, got {env[name]!r}") from None
            if current == "max_pixels":
                max_pixels = value
            else:
                max_file = value
            sources.append(f"${name}")
    return SiteSettings(trusted_entry_points=entry_points, trusted_keys=keys, max_pixels=max_pixels,
                        max_file_pixels=max(max_file, max_pixels),
                        source=", ".join(sources) if sources else "defaults")


def entry_point_trusted(entry_point: str, trusted: tuple[str, ...] | list[str]) -> bool:
    """True when ``"package.module:factory"`` is trusted: named exactly (``"mypkg.nets:build"``), or its
    module is a trusted module or lies inside a trusted package (``"mypkg"`` trusts ``"mypkg.nets:build"``;
    ``"mypkg.nets"`` does not trust ``"mypkg.other:build"``)."""
    module = entry_point.partition(":")[0]
    for t in trusted:
        if ":" in t:
            if entry_point == t:
                return True
        elif module == t or module.startswith(t + "."):
            return True
    return False
