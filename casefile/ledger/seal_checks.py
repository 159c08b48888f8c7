"""The seal part of verify: each seal entry against the entries before it and the trusted keys, and an
exported seal file against the ledger and the trusted keys."""

from __future__ import annotations

from typing import Any

from casefile import schemas
from casefile.errors import ValidationError
from casefile.ledger import tables as t
from casefile.ledger.keys import short, signature_valid
from casefile.ledger.merkle import MerkleAccumulator
from casefile.ledger.report import ExternalSeal, VerifyReport
from casefile.ledger.sealfile import SealFile, body_message
from casefile.ledger.trust import KeyTrust, SealVerdict, TrustedKeys, TrustProblem

Problem = tuple[int | None, str]


class SealChecker:
    """Fed every entry in seq order; keeps the Merkle tree over entry hashes and the key trust so far."""

    def __init__(self, trusted: TrustedKeys, seal_file: SealFile | None) -> None:
        self.acc = MerkleAccumulator()
        self.trust = KeyTrust(trusted)
        self.file = seal_file
        self.verdicts: dict[int, SealVerdict] = {}
        self.file_entry_hash: str | None = None
        self.sealed: tuple[str, str] | None = None  # (Merkle root, head hash) after the sealed prefix
        if seal_file is not None and seal_file.tree_size == 0:
            self.sealed = (self.acc.root().hex(), t.GENESIS_HASH)

    def add(self, seq: int, kind: str, body: Any, prev_hash: str, entry_hash: str) -> str | None:
        """Check the entry if it is a seal, then add its hash to the tree; the problem, or None."""
        if kind == "seal":
            problem = self._seal_entry(seq, body, prev_hash)
            if problem:
                return problem
        if self.file is not None and seq == self.file.seq:
            self.file_entry_hash = entry_hash
        self.acc.add(bytes.fromhex(entry_hash))
        if self.file is not None and self.acc.size == self.file.tree_size:
            self.sealed = (self.acc.root().hex(), entry_hash)
        return None

    def _seal_entry(self, seq: int, body: dict[str, Any], prev_hash: str) -> str | None:
        try:  # append checked it, but a chain rewritten by hand may carry anything
            schemas.validate("seal", body)
        except ValidationError as exc:
            return f"not a valid seal: {exc}"
        if body["tree_size"] != self.acc.size:
            return f"seal covers {body['tree_size']} entries but {self.acc.size} come before it"
        if body["head_hash"] != (prev_hash if self.acc.size else t.GENESIS_HASH):
            return "seal's head hash does not match the entry before it"
        if body["merkle_root"] != self.acc.root().hex():
            return "seal's Merkle root does not match the entries before it"
        if "signature" in body and not signature_valid(body["signature"], body_message(body)):
            return "seal's Ed25519 signature does not verify"
        verdict = self.trust.judge(seq, body)
        if isinstance(verdict, TrustProblem):
            return verdict
        self.verdicts[seq] = verdict
        return None

    def counts(self) -> dict[str, int]:
        out = {"trusted": 0, "untrusted": 0, "unsigned": 0}
        for v in self.verdicts.values():
            out[v.trust] += 1
        return out

    def external(self, report: VerifyReport, unsigned_ok: bool) -> Problem | None:
        """After the walk: does the ledger hold the sealed history, and is the file's signer trusted?"""
        f = self.file
        assert f is not None
        if report.entries < f.tree_size:
            return report.entries + 1, (f"entries missing: the ledger ends at seq {report.entries} but the seal "
                                        f"covers {f.tree_size} entries (the tail was truncated)")
        if self.sealed != (f.body["merkle_root"], f.body["head_hash"]):
            return f.tree_size, (f"history differs from the sealed one: entries 1..{f.tree_size} no longer hash "
                                 "to the sealed Merkle root (the chain was rewritten)")
        if self.file_entry_hash is None:
            return f.seq, "the seal entry itself is missing from the ledger"
        if self.file_entry_hash != f.hash:
            return f.seq, "the seal entry in the ledger differs from the exported seal"
        verdict = self.verdicts[f.seq] if f.key else SealVerdict("unsigned")
        report.external_seal = ExternalSeal(f.seq, f.tree_size, f.body["merkle_root"], f.version, verdict.trust,
                                            verdict.key, verdict.because)
        if verdict.trust == "trusted" or unsigned_ok:
            return None
        if f.version == 1:
            why = ("the seal file is version 1, which leaves its seq and hash unsigned, so it counts as unsigned; "
                   "export a new seal (casefile seal --key K -o FILE), or pass --unsigned-ok")
        elif verdict.trust == "unsigned":
            why = "the seal file is unsigned, so it cannot show who made it; pass --unsigned-ok to accept that"
        else:
            why = (f"the seal file is signed by key {short(f.key or '')}, but no key is trusted: pass --public-key "
                   "FILE or set trusted_keys in the site settings (or --unsigned-ok to accept an unproven signer)")
        return None, TrustProblem(why)
