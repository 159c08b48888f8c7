"""Merkle tree hashing checked against RFC 6962 section 2.1, computed by hand in the test."""

import hashlib

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from casefile.ledger.merkle import EMPTY_ROOT, MerkleAccumulator, inclusion_proof, root, verify_inclusion


def H(b: bytes) -> bytes:
    return hashlib.sha256(b).digest()


# RFC 6962 section 2.1: MTH({}) = SHA-256(); leaf = SHA-256(0x00 || d); node = SHA-256(0x01 || l || r);
# for n > 1 split at k, the largest power of two smaller than n.
D = [b"a", b"b", b"c", b"d", b"e"]
L = [H(b"\x00" + d) for d in D]


def N(left: bytes, right: bytes) -> bytes:
    return H(b"\x01" + left + right)


def test_empty_and_single_leaf():
    assert EMPTY_ROOT == H(b"")
    assert root([]) == H(b"")
    assert root(D[:1]) == L[0]


def test_roots_by_hand():
    assert root(D[:2]) == N(L[0], L[1])
    # n = 3: k = 2 → MTH = N(MTH(a,b), MTH(c))
    assert root(D[:3]) == N(N(L[0], L[1]), L[2])
    assert root(D[:4]) == N(N(L[0], L[1]), N(L[2], L[3]))
    # n = 5: k = 4 → N(MTH(a..d), MTH(e))
    assert root(D) == N(N(N(L[0], L[1]), N(L[2], L[3])), L[4])


def test_inclusion_paths_by_hand():
    # RFC 6962 section 2.1.1 PATH(m, D[n]): for n = 5, leaf 2 (c): [L3, N(L0,L1), L4]
    assert inclusion_proof(D, 2) == [L[3], N(L[0], L[1]), L[4]]
    # leaf 4 (e) in a tree of 5: its sibling is the whole left subtree of 4
    assert inclusion_proof(D, 4) == [N(N(L[0], L[1]), N(L[2], L[3]))]
    for i in range(5):
        assert verify_inclusion(D[i], i, 5, inclusion_proof(D, i), root(D))
    assert not verify_inclusion(b"x", 2, 5, inclusion_proof(D, 2), root(D))
    with pytest.raises(IndexError):
        inclusion_proof(D, 5)


def _reference_mth(leaves: list[bytes]) -> bytes:
    """MTH(D[n]) exactly as RFC 6962 section 2.1 defines it, recursively (the check for the streaming form)."""
    n = len(leaves)
    if n == 0:
        return H(b"")
    if n == 1:
        return H(b"\x00" + leaves[0])
    k = 1
    while k * 2 < n:
        k *= 2
    return H(b"\x01" + _reference_mth(leaves[:k]) + _reference_mth(leaves[k:]))


@settings(max_examples=60, deadline=None)
@given(st.lists(st.binary(min_size=0, max_size=8), min_size=0, max_size=40))
def test_streaming_root_equals_recursive_definition(leaves):
    acc = MerkleAccumulator()
    for i, leaf in enumerate(leaves):
        acc.add(leaf)
        assert acc.root() == _reference_mth(leaves[: i + 1])
    assert acc.root() == _reference_mth(leaves)
    for i in range(len(leaves)):
        assert verify_inclusion(leaves[i], i, len(leaves), inclusion_proof(leaves, i), acc.root())
