"""The append-only, hash-chained ledger: entries, blobs, derived query tables, seals and verify.

Imports run one way: tables, derive, merkle, keys, location, postgres → engines → store → sealfile, trust →
seal, report, upgrade, claims → seal_checks → verify → copy, facade (the ``Ledger`` class) → this package.
"""

from casefile.ledger.claims import Claims
from casefile.ledger.copy import CopyReport, copy_ledger
from casefile.ledger.facade import Ledger, SealSource
from casefile.ledger.keys import KeySource, generate_key, load_private_key, load_public_key
from casefile.ledger.report import ExternalSeal, VerifyReport
from casefile.ledger.sealfile import (
           SealFile,
           parse_seal_file,
           read_seal_file,
           seal_file_bytes,
           write_seal_file,
)
from casefile.ledger.store import CaseHistory, Entry, Store, entry_hash, model_condition, utc_now
from casefile.ledger.trust import SealTrust, TrustedKeys

__all__ = ["CaseHistory", "Claims", "CopyReport", "Entry", "ExternalSeal", "KeySource", "Ledger", "SealFile", "SealSource", "SealTrust",
           "Store", "TrustedKeys", "VerifyReport", "copy_ledger", "entry_hash", "generate_key", "load_private_key", "model_condition",
           "load_public_key", "parse_seal_file", "read_seal_file", "seal_file_bytes", "utc_now",
           "write_seal_file"]
