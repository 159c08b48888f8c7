"""The append-only, hash-chained ledger: entries, blobs, derived query tables, seals and verify."""

from casefile.ledger.seal import generate_key, read_seal_file, seal_file_bytes
from casefile.ledger.store import CaseHistory, Entry, Ledger, entry_hash, utc_now
from casefile.ledger.verify import VerifyReport

__all__ = ["CaseHistory", "Entry", "Ledger", "VerifyReport", "entry_hash", "generate_key", "read_seal_file",
           "seal_file_bytes", "utc_now"]
