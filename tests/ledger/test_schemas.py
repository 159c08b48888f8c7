"""The compiled validator that gates appends agrees with the reference validator (jsonschema)."""

from __future__ import annotations

import copy

import fastjsonschema
from hypothesis import given, settings
from hypothesis import strategies as st

from casefile import schemas
from tests.ledger.bodies import amendment_body, case_body

VALID = {
    "case": case_body(1, blob=b"x"),
    "amendment": {**amendment_body(3, "a" * 64), "case_id": "c-1", "changes": {"label": "crack"}},
    "failed": {"attempted_at": "2026-12-01T10:00:00Z", "file_name": "a.png", "file_sha256": None,
               "stage": "load", "reason": "a.png: truncated"},
    "seal": {"sealed_at": "2026-12-01T10:00:00Z", "tree_size": 3, "head_hash": "b" * 64,
             "merkle_root": "c" * 64, "hash_algorithm": "sha-256", "successor": "d" * 64,
             "signature": {"algorithm": "Ed25519", "public_key": "e" * 64, "value": "f" * 128}},
    "rebuild": {"rebuilt_at": "2026-12-01T10:00:00Z", "reason": "tables restored", "entries": 4,
                "rows": {"cases": 3, "entry_blobs": 0}},
    "seal_file": {"format": "casefile seal file, version 2", "seq": 4, "prev_hash": "b" * 64, "hash": "a" * 64,
                  "body": {"tree_size": 3},
                  "file_signature": {"algorithm": "Ed25519", "public_key": "e" * 64, "value": "f" * 128}},
}
JSON_VALUES = st.recursive(st.none() | st.booleans() | st.integers(-5, 70) | st.floats(-2, 2)
                           | st.sampled_from(["", "pass", "fail", "a" * 64, "2026-12-01T10:00:00Z", "x"]),
                           lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=4), inner,
                                                                                         max_size=3),
                           max_leaves=6)


def _paths(doc, prefix=()):
    yield prefix
    if isinstance(doc, dict):
        for k, v in doc.items():
            yield from _paths(v, (*prefix, k))
    elif isinstance(doc, list):
        for i, v in enumerate(doc):
            yield from _paths(v, (*prefix, i))


def _agree(kind, doc) -> bool:
    try:
        schemas._fast(kind)(doc)
        fast = True
    except fastjsonschema.JsonSchemaException:
        fast = False
    return fast == schemas.validator(kind).is_valid(doc)


def test_valid_bodies_pass_both():
    for kind, body in VALID.items():
        schemas.validate(kind, body)
        assert _agree(kind, body)


@settings(max_examples=300, deadline=None)
@given(st.sampled_from(sorted(VALID)), st.data())
def test_mutated_bodies_get_the_same_verdict(kind, data):
    doc = copy.deepcopy(VALID[kind])
    paths = list(_paths(doc))
    for _ in range(data.draw(st.integers(1, 3))):
        path = data.draw(st.sampled_from(paths))
        if not path:
            continue
        parent = doc
        for p in path[:-1]:
            parent = parent[p] if isinstance(parent, dict) and p in parent or isinstance(parent, list) and \
                isinstance(p, int) and p < len(parent) else None
            if parent is None:
                break
        if parent is None:
            continue
        last = path[-1]
        if isinstance(parent, dict) and data.draw(st.booleans()):
            parent.pop(last, None)
        elif isinstance(parent, dict) or (isinstance(parent, list) and isinstance(last, int) and last < len(parent)):
            parent[last] = data.draw(JSON_VALUES)
    assert _agree(kind, doc)
