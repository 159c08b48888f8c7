"""Which seal keys a verifier trusts: keys it is given and the site's trusted keys, never a key a seal carries.

A seal proves who made it only through a key the verifier trusts and keeps outside the ledger: a key
given to verify (``--public-key``), or one of the site's ``trusted_keys`` (casefile.site). A key can
also hand over to a successor: a seal signed by a trusted key that names a ``successor`` makes that
key trusted for the seals after it, and from then on the old key may sign no more seals. The handover
is recorded under the old key's signature inside the hash chain, so nobody without the old key can
make one, and removing it breaks the chain (or, at the tail, a kept seal file).
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

from casefile.ledger.keys import KeySource, load_public_key, short
from casefile.site import load_site_settings

SealTrust = Literal["trusted", "untrusted", "unsigned"]


class TrustProblem(str):
    """A problem with who signed a seal, not with the ledger's integrity (verify says "NOT verified")."""


@dataclass(frozen=True)
class TrustedKeys:
    """Public keys (hex) the verifier trusts, each with where it came from (for messages)."""

    keys: Mapping[str, str] = field(default_factory=dict)
    files: tuple[str, ...] = ()  # key files read, so verify can say when one sits beside the ledger

    @classmethod
    def load(cls, given: KeySource | Sequence[KeySource] | None = None, *, site: bool = True) -> TrustedKeys:
        """Keys given by the caller (files or 64 hex digits), then, with ``site``, the site's trusted keys.
        A key that cannot be read is refused with one line naming it."""
        sources: list[KeySource] = [] if given is None else (
            [given] if isinstance(given, str | os.PathLike) else list(given))
        keys: dict[str, str] = {}
        files: list[str] = []
        for src in sources:
            keys.setdefault(load_public_key(src), f"given key {os.fspath(src)}")
            if Path(src).is_file():
                files.append(os.fspath(src))
        if site:
            settings = load_site_settings()
            for entry in settings.trusted_keys:
                keys.setdefault(load_public_key(entry), f"site trusted key ({settings.source})")
                if Path(entry).is_file():
                    files.append(entry)
        return cls(keys, tuple(files))

    def __bool__(self) -> bool:
        return bool(self.keys)


@dataclass(frozen=True)
class SealVerdict:
    """What one seal entry's signature proves: who signed it, and whether that key is trusted (and why)."""

    trust: SealTrust
    key: str | None = None
    because: str | None = None


class KeyTrust:
    """Trust as verify walks the chain: the trusted keys, plus successors handed over by trusted seals,
    minus keys that have handed over.

    With no trusted key at all, a signed seal is ``untrusted``: its signature was checked only against
    the key it carries, which proves nothing about who made it. With trusted keys, a seal signed by any
    other key is a problem: a site that has declared its keys must look at a seal claiming authority
    from a key it does not know (a forgery, or a key nobody registered). An unsigned seal is only noted:
    it is a checkpoint that claims no authority.
    """

    def __init__(self, trusted: TrustedKeys) -> None:
        self.configured = bool(trusted)
        self.active: dict[str, str] = dict(trusted.keys)
        self.handed_over: dict[str, tuple[int, str]] = {}  # key -> (seq of its handover, successor)

    def judge(self, seq: int, body: Mapping[str, Any]) -> SealVerdict | TrustProblem:
        """The verdict on the seal entry ``seq`` (its signature already checked), or the problem with it."""
        sig = body.get("signature")
        if not sig:
            return SealVerdict("unsigned")
        key = sig["public_key"]
        problem = self.refusal(key)
        if problem:
            return problem
        if not self.configured:
            verdict = SealVerdict("untrusted", key)
        elif key in self.active:
            verdict = SealVerdict("trusted", key, self.active[key])
        else:
            return TrustProblem(f"seal signed by key {short(key)}, which is not a trusted key and was not handed "
                                "over to by one")
        successor = body.get("successor")
        if successor:
            self.handed_over[key] = (seq, successor)
            self.active.pop(key, None)
            if verdict.trust == "trusted":
                self.active.setdefault(successor, f"successor of key {short(key)} from seal seq {seq}")
        return verdict

    def refusal(self, key: str, successor: str | None = None) -> TrustProblem | None:
        """Why ``key`` may not sign a seal (naming ``successor``) after the seals judged so far, or None."""
        if key in self.handed_over:
            at, to = self.handed_over[key]
            return TrustProblem(f"seal signed by key {short(key)}, which handed over to key {short(to)} at seq "
                                f"{at}; it may sign no later seal")
        if successor is not None and successor == key:
            return TrustProblem(f"key {short(key)} cannot be its own successor")
        if successor is not None and successor in self.handed_over:
            return TrustProblem(f"key {short(successor)} has already handed over; it cannot be a successor again")
        return None
