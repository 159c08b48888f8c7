"""The Ledger users open: the store, with seal and verify as methods (the one module above all three).

The store sits at the bottom of the package and knows nothing of seals or verify; seal.py and verify.py
take a store. This class only joins them, so ``Ledger(url).seal(...)`` and ``.verify(...)`` keep working
as the Python contract says, with no import circle (not even a lazy one inside a method).
"""

from __future__ import annotations

import os
from collections.abc import Sequence

from casefile.errors import LedgerError
from casefile.ledger.keys import KeySource
from casefile.ledger.report import VerifyReport
from casefile.ledger.seal import seal
from casefile.ledger.sealfile import SealFile, read_seal_file
from casefile.ledger.store import Entry, Store
from casefile.ledger.trust import TrustedKeys
from casefile.ledger.verify import verify

SealSource = str | os.PathLike[str] | SealFile


class Ledger(Store):
    """An append-only, hash-chained ledger in SQLite, with seals and verify.

    A ledger whose query tables were made by an older release (they lack a column this release derives)
    is refused in one line saying to run ``casefile rebuild``, unless ``allow_outdated`` (rebuild itself,
    and verify, which reports it): reading or appending to it would fail half-way or leave its older
    cases out of the new columns' filters.
    """

    def __init__(self, url: str, *, create: bool = True, synchronous: str = "FULL",
                 allow_outdated: bool = False) -> None:
        super().__init__(url, create=create, synchronous=synchronous)
        outdated = [] if allow_outdated else self.outdated_tables()
        if outdated:
            self.close()
            shown = ", ".join(outdated[:4]) + (" ..." if len(outdated) > 4 else "")
            raise LedgerError(f"{self.path}: query tables made by an older release of casefile lack {shown}; run "
                              "`casefile rebuild --reason TEXT` once (it recomputes them from the entries, which "
                              "stay as they are)")

    def verify(self, seal: SealSource | None = None, public_key: KeySource | Sequence[KeySource] | None = None,
               *, site_keys: bool = True, unsigned_ok: bool = False, strict: bool = False) -> VerifyReport:
        """Check the whole ledger; with ``seal`` (a seal file or its path), also against that seal.

        The trusted keys are ``public_key`` (one or several: PEM files or 64 hex digits) and, with
        ``site_keys``, the site's trusted keys (casefile.site). A seal file whose signer is not trusted,
        or that is unsigned, fails unless ``unsigned_ok``; the report then says it does not prove who
        made the seal. A malformed seal file or key file raises LedgerError (one line) before any check.
        """
        seal_file = seal if isinstance(seal, SealFile) or seal is None else read_seal_file(seal)
        trusted = TrustedKeys.load(public_key, site=site_keys)
        return verify(self, seal_file, trusted, unsigned_ok=unsigned_ok, strict=strict)

    def seal(self, key_path: KeySource | None = None, note: str | None = None, *,
             successor: KeySource | None = None, output: str | os.PathLike[str] | None = None) -> Entry:
        """Append a seal over every entry so far (see casefile.ledger.seal.seal)."""
        return seal(self, key_path, note, successor=successor, output=output)
