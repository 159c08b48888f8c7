"""Entry points: which Python factories may build a model, checked before anything is imported or called.

A model card travels with the data, so it is never a source of code. An entry point
``"package.module:factory"`` (in a card, or given as the model) is used only when something outside the
card trusts it:

* the site settings (``trusted_entry_points`` in the site file, or ``$CASEFILE_TRUSTED_ENTRY_POINTS``;
  see casefile.site), or
* the calling program (``load_model(..., trusted_entry_points=[...])``): a caller's own code is outside
  the card, so it may vouch for its own factories (the demo and the tests do this).

A trusted name is a package (trusts every module inside it), a module, or one exact
``"module:factory"``. After the trusted module is imported, the target must be a function or an
``nn.Module`` class written in Python and defined in a trusted module (a trusted module that merely
imports ``subprocess.getoutput`` does not make it a factory); builtins, ``functools.partial`` objects
and instances with ``__call__`` are refused. The card's ``entry_point_args`` must be JSON strings,
numbers and booleans with identifier names; they are passed as keyword arguments only, and the call
must return an ``nn.Module``. Trusting a module trusts every function in it: trust only code written to
build models.
"""

from __future__ import annotations

import importlib
import inspect
import keyword
import re
from collections.abc import Callable, Iterable, Mapping
from typing import Any

from torch import nn

from casefile import site
from casefile.errors import ModelError, one_line

ENTRY_POINT = re.compile(r"^[A-Za-z_]\w*(\.[A-Za-z_]\w*)*:[A-Za-z_]\w*$", re.ASCII)


def trusted_names(extra: str | Iterable[str] | None = None) -> tuple[str, ...]:
    """The site's trusted entry points (casefile.site) and those a calling program adds."""
    if isinstance(extra, str):
        extra = (extra,)
    return tuple(site.load_site_settings().trusted_entry_points) + tuple(extra or ())


def how_to_trust(entry_point: str) -> str:
    module = entry_point.partition(":")[0]
    return (f"to trust it, add {module!r} or {entry_point!r} to \"trusted_entry_points\" in "
            f"{site.config_dir() / site.SITE_FILE} or to ${site.ENTRY_POINTS_ENV} "
            "(Python: load_model(..., trusted_entry_points=[...]))")


def resolve_factory(entry_point: str, trusted: Iterable[str], where: str) -> Callable[..., Any]:
    """The factory an entry point names, once it is known to be trusted; every refusal is one line."""
    if not ENTRY_POINT.match(entry_point):
        raise ModelError(f"{where}: entry point {entry_point!r} is not of the form package.module:factory")
    trusted = tuple(trusted)
    if not site.entry_point_trusted(entry_point, trusted):
        raise ModelError(f"{where}: entry point {entry_point} is not trusted at this site, so nothing was "
                         f"imported or run (a model card is data, not code); {how_to_trust(entry_point)}")
    module_name, _, attr = entry_point.partition(":")
    try:
        mod = importlib.import_module(module_name)
    except Exception as exc:  # a trusted module is still code that can fail: report it in one line
        raise ModelError(f"{where}: cannot import {module_name!r} for entry point {entry_point}: "
                         f"{one_line(exc)}") from None
    target = getattr(mod, attr, None)
    if target is None:
        raise ModelError(f"{where}: entry point {entry_point}: {module_name} has no callable {attr!r}")
    if inspect.isclass(target):
        if not issubclass(target, nn.Module):
            raise ModelError(f"{where}: entry point {entry_point} is a class that is not a torch.nn.Module")
    elif not inspect.isfunction(target):
        raise ModelError(f"{where}: entry point {entry_point} is a {type(target).__name__}, not a function "
                         "or nn.Module class written in Python; only such a factory may build a model")
    home = getattr(target, "__module__", None) or "?"
    if entry_point not in trusted and not site.entry_point_trusted(f"{home}:{attr}", trusted):
        raise ModelError(f"{where}: entry point {entry_point} is defined in {home}, which is not trusted "
                         f"({module_name} only imports it); {how_to_trust(f'{home}:{attr}')}")
    return target


def check_factory_args(args: Any, where: str) -> dict[str, str | int | float | bool]:
    """``entry_point_args``: identifier names and JSON strings, numbers or booleans, nothing else."""
    if not isinstance(args, Mapping):
        raise ModelError(f"{where}: field entry_point_args must be an object of keyword arguments")
    out: dict[str, str | int | float | bool] = {}
    for key, value in args.items():
        if not (isinstance(key, str) and key.isidentifier() and key.isascii() and not keyword.iskeyword(key)):
            raise ModelError(f"{where}: field entry_point_args: {key!r} is not a Python identifier")
        if not isinstance(value, (str, int, float, bool)):
            raise ModelError(f"{where}: field entry_point_args.{key}: only strings, numbers and booleans "
                             f"are allowed, not {type(value).__name__}")
        out[key] = value
    return out


def build_module(entry_point: str, args: Any, trusted: Iterable[str], where: str) -> nn.Module:
    """Call a trusted factory with keyword arguments only; the result must be an nn.Module."""
    kwargs = check_factory_args(args, where)
    factory = resolve_factory(entry_point, trusted, where)
    try:
        module = factory(**kwargs)
    except Exception as exc:
        raise ModelError(f"{where}: entry point {entry_point} failed to build the model: "
                         f"{one_line(exc)}") from None
    if not isinstance(module, nn.Module):
        raise ModelError(f"{where}: entry point {entry_point} returned {type(module).__name__}, not a module")
    return module
