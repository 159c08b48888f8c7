"""Flags and notes: which check outcomes send a case to a person, by a policy every room reads alike.

A *flag* sends the case to a person (a second read); a *note* only informs. Each check has a rule:

- ``"flag-on-warn"``: a warn or a fail of this check flags the case;
- ``"flag-on-fail"``: only a fail flags; a warn is a note;
- ``"note"``: the check never flags; its outcome is shown and recorded, nothing more.

An outcome of ``pass`` or ``not-run`` never flags (a check that could not run says why on the sheet;
it is no evidence either way). The default policy and the reasons for each rule are in
:mod:`casefile.explain.checks`; a model card may override it per check (``flag_policy``) and the policy
used is stored with every case in its settings.

This room sits below the explanation, the ledger's query tables, the second-read plans and the audit,
which all decide flags the same way: a record from an older release has no ``flagged`` field, and every
reader then applies :data:`DEFAULT_FLAG_POLICY` to the record's check outcomes.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import Any, Literal, get_args

Outcome = Literal["pass", "warn", "fail", "not-run"]
FlagRule = Literal["flag-on-warn", "flag-on-fail", "note"]

OUTCOMES: tuple[str, ...] = get_args(Outcome)
FLAG_RULES: tuple[str, ...] = get_args(FlagRule)

# One rule per check; the reasons are in casefile.explain.checks (module docstring) and the README.
DEFAULT_FLAG_POLICY: dict[str, FlagRule] = {
    "numerical": "flag-on-fail",
    "confidence": "flag-on-fail",
    "randomisation": "flag-on-fail",
    "method_agreement": "note",
    "deletion": "note",
    "region_focus": "flag-on-warn",
}
CHECK_NAMES: tuple[str, ...] = tuple(DEFAULT_FLAG_POLICY)

_FLAGGING: dict[str, frozenset[str]] = {
    "flag-on-warn": frozenset({"warn", "fail"}),
    "flag-on-fail": frozenset({"fail"}),
    "note": frozenset(),
}


def policy_problem(policy: Any) -> str | None:
    """Why ``policy`` (check name -> rule) cannot be used, in a few words; None when it can."""
    if not isinstance(policy, Mapping):
        return "the flag policy must map check names to rules"
    for name, rule in policy.items():
        if name not in DEFAULT_FLAG_POLICY:
            return f"unknown check {name!r} (checks: {', '.join(CHECK_NAMES)})"
        if rule not in FLAG_RULES:
            return f"check {name!r}: rule {rule!r} is not one of {', '.join(FLAG_RULES)}"
    return None


def merged_policy(overrides: Mapping[str, str] | None = None) -> dict[str, str]:
    """The default policy with ``overrides`` laid over it (checked by the caller with policy_problem)."""
    return {**DEFAULT_FLAG_POLICY, **dict(overrides or {})}


def flags(name: str, outcome: str, policy: Mapping[str, str] | None = None) -> bool:
    """True when ``outcome`` of check ``name`` sends the case to a person under ``policy``.

    A check the policy does not name follows ``flag-on-fail``: a failure of a check nobody classed is
    never silently a note."""
    rule = (policy if policy is not None else DEFAULT_FLAG_POLICY).get(name, "flag-on-fail")
    return outcome in _FLAGGING.get(rule, _FLAGGING["flag-on-fail"])


def flagging_checks(checks: Iterable[Mapping[str, Any]], policy: Mapping[str, str] | None = None) -> list[str]:
    """Names of the checks whose outcome flags, in record order.

    A check that carries its own ``flags`` (a record written by this release) says so itself; otherwise
    its outcome is read by ``policy`` (the default policy when None)."""
    out = []
    for c in checks:
        f = c.get("flags")
        if not isinstance(f, bool):
            f = flags(str(c.get("name")), str(c.get("outcome")), policy)
        if f:
            out.append(str(c.get("name")))
    return out


_RANK = {"fail": 3, "warn": 2, "pass": 1}


def worst(outcomes: Iterable[str]) -> Outcome:
    """A case's status from its checks' outcomes: fail > warn > pass; not-run only when no check ran."""
    ranked = [o for o in outcomes if o in _RANK]
    return max(ranked, key=_RANK.__getitem__) if ranked else "not-run"  # type: ignore[return-value]


def case_flagged(body: Mapping[str, Any]) -> bool:
    """Whether a case body is flagged: its own ``flagged`` field, else the default rule on its checks."""
    f = body.get("flagged")
    if isinstance(f, bool):
        return f
    return bool(flagging_checks(body.get("checks") or []))
