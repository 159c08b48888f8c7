"""What verify found: intact or the first bad seq, and in plain words what that proves and what it does not."""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import Any, Literal

from casefile.ledger import tables as t
from casefile.ledger.keys import short
from casefile.ledger.trust import SealTrust, TrustProblem

Failure = Literal["integrity", "trust"]


@dataclass
class ExternalSeal:
    """The seal file verify was given, as far as it was checked."""

    seq: int
    tree_size: int
    merkle_root: str
    format_version: int
    trust: SealTrust
    key: str | None = None  # the public key (hex) the file is signed with
    because: str | None = None  # why that key is trusted


@dataclass
class VerifyReport:
    ok: bool = True
    first_bad_seq: int | None = None
    problem: str | None = None
    failure: Failure | None = None  # integrity: the ledger or seal file was changed; trust: the signer is not proven
    entries: int = 0
    blobs: int = 0
    head_seq: int = 0
    head_hash: str = t.GENESIS_HASH
    seals_checked: int = 0
    seal_trust: dict[str, int] = field(default_factory=lambda: {"trusted": 0, "untrusted": 0, "unsigned": 0})
    external_seal: ExternalSeal | None = None
    proves: list[str] = field(default_factory=list)
    does_not_prove: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    def fail(self, seq: int | None, problem: str) -> VerifyReport:
        self.ok, self.first_bad_seq, self.problem = False, seq, str(problem)
        self.failure = "trust" if isinstance(problem, TrustProblem) else "integrity"
        self.proves, self.does_not_prove = [], []
        return self

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)

    def summary(self) -> str:
        """One line: intact (with the seal matched), or the first problem."""
        if self.ok:
            sealed = ""
            if self.external_seal:
                sealed = (f"; matches the seal at seq {self.external_seal.seq} over "
                          f"{self.external_seal.tree_size} entries")
            return (f"intact: {self.entries} entries, {self.blobs} blobs, head seq {self.head_seq} "
                    f"hash {self.head_hash[:16]}…{sealed}")
        if self.failure == "trust":
            where = "" if self.first_bad_seq is None else f"seq {self.first_bad_seq}: "
            return f"NOT verified: {where}{self.problem}"
        if self.first_bad_seq is None:
            return f"NOT intact: {self.problem}"
        return f"NOT intact: first bad seq {self.first_bad_seq}: {self.problem}"

    def lines(self) -> list[str]:
        """The summary, then one line per thing proven and per thing not proven."""
        return ([self.summary()] + [f"proves: {p}" for p in self.proves]
                + [f"does not prove: {p}" for p in self.does_not_prove])

    def describe(self, unsigned_ok: bool) -> None:
        """Fill ``proves`` and ``does_not_prove`` for an intact ledger."""
        self.proves.append(f"entries 1..{self.head_seq} each hash to their recorded hash and link to the entry "
                           f"before; {self.blobs} blobs match their digests; the query tables agree with the entries")
        if self.seals_checked:
            counts = ", ".join(f"{n} {what}" for what, n in self.seal_trust.items() if n)
            gloss = ("; 'untrusted': checked only against the key the seal carries" if self.seal_trust["untrusted"]
                     else "")
            what = "seal entry matches" if self.seals_checked == 1 else "seal entries match"
            self.proves.append(f"{self.seals_checked} {what} the entries before them ({counts}{gloss})")
        seal = self.external_seal
        if seal is None:
            self.does_not_prove.append("that the history was not rewritten end to end by someone with write access: "
                                       "only a seal file kept elsewhere shows that (--seal FILE)")
            return
        if seal.trust == "trusted":
            self.proves.append(f"entries 1..{seal.tree_size} are exactly the history sealed at seq {seal.seq} by "
                               f"key {short(seal.key or '')} ({seal.because})")
        else:
            signer = "it is unsigned" if seal.trust == "unsigned" else \
                f"its key {short(seal.key or '')} is not a trusted key"
            self.proves.append(f"the ledger matches this seal file (entries 1..{seal.tree_size} and the seal "
                               f"entry seq {seal.seq})")
            self.does_not_prove.append(f"who made the seal: {signer}"
                                       + (" (accepted with --unsigned-ok)" if unsigned_ok else ""))
        if self.head_seq > seal.seq:
            self.does_not_prove.append(f"anything about entries {seal.seq + 1}..{self.head_seq} beyond their "
                                       "hash chain: a later seal covers them")
