"""RFC 6962 (section 2.1) Merkle tree hashing over entry hashes, streaming and with inclusion proofs."""

from __future__ import annotations

import hashlib
from collections.abc import Iterable, Sequence


def leaf_hash(data: bytes) -> bytes:
    """MTH({d}) = SHA-256(0x00 || d)."""
    return hashlib.sha256(b"\x00" + data).digest()


def node_hash(left: bytes, right: bytes) -> bytes:
    """Interior node = SHA-256(0x01 || left || right)."""
    return hashlib.sha256(b"\x01" + left + right).digest()


EMPTY_ROOT = hashlib.sha256(b"").digest()  # MTH({}) = SHA-256() of the empty string


class MerkleAccumulator:
    """Adds leaves one at a time in O(log n) memory; ``root()`` is the RFC 6962 root of the prefix so far."""

    def __init__(self) -> None:
        self._stack: list[tuple[int, bytes]] = []  # (subtree size, hash); sizes strictly decreasing
        self.size = 0

    def add(self, data: bytes) -> None:
        size, h = 1, leaf_hash(data)
        while self._stack and self._stack[-1][0] == size:
            left_size, left = self._stack.pop()
            size, h = left_size + size, node_hash(left, h)
        self._stack.append((size, h))
        self.size += 1

    def root(self) -> bytes:
        if not self._stack:
            return EMPTY_ROOT
        # The RFC's tree splits at the largest power of two below n, so the complete subtrees on the
        # stack fold together from the right.
        h = self._stack[-1][1]
        for _, left in reversed(self._stack[:-1]):
            h = node_hash(left, h)
        return h


def root(leaves: Iterable[bytes]) -> bytes:
    acc = MerkleAccumulator()
    for leaf in leaves:
        acc.add(leaf)
    return acc.root()


def _largest_power_of_two_below(n: int) -> int:
    k = 1
    while k * 2 < n:
        k *= 2
    return k


def inclusion_proof(leaves: Sequence[bytes], index: int) -> list[bytes]:
    """PATH(m, D[n]) of RFC 6962 section 2.1.1: the audit path for leaf ``index``."""
    n = len(leaves)
    if not 0 <= index < n:
        raise IndexError(f"leaf {index} is outside a tree of {n}")
    if n == 1:
        return []
    k = _largest_power_of_two_below(n)
    if index < k:
        return inclusion_proof(leaves[:k], index) + [root(leaves[k:])]
    return inclusion_proof(leaves[k:], index - k) + [root(leaves[:k])]


def verify_inclusion(data: bytes, index: int, size: int, proof: Sequence[bytes], expected_root: bytes) -> bool:
    """Check an audit path (the verification algorithm of RFC 9162 section 2.1.3.2)."""
    if not 0 <= index < size:
        return False
    fn, sn = index, size - 1
    r = leaf_hash(data)
    for p in proof:
        if sn == 0:
            return False
        if fn & 1 or fn == sn:
            r = node_hash(p, r)
            if not fn & 1:
                while fn & 1 == 0 and fn != 0:
                    fn >>= 1
                    sn >>= 1
        else:
            r = node_hash(r, p)
        fn >>= 1
        sn >>= 1
    return sn == 0 and r == expected_root
