"""Checking a sign-in: the reader's password against their account, failed sign-ins recorded in the ledger
(``sign_in_failed`` entries) and rate-limited.

Rules (each refusal says one line; nothing but a ``sign_in_failed`` entry is ever written here):
- a reader id that is not well formed cannot match any account: refused, not recorded;
- a reader id with ``limit`` failures within the last ``window_s`` seconds is locked: its sign-ins are
  refused without checking the password and without recording, until the oldest failure leaves the
  window (the entry that reached the limit says until when);
- when ``overall_limit`` failures of any ids fall within the window, every sign-in is refused and
  nothing recorded, so a flood of guesses cannot fill the ledger;
- otherwise a wrong password, or an id with no account, is recorded with the count so far in the window.
A success does not clear the count (the ledger, read again at start, would not know of it either).
The counts start from the ledger's ``sign_in_failed`` entries within the window, so a restart does not
lift a lock.
"""

from __future__ import annotations

import time
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass
from datetime import UTC, datetime

from casefile.ledger import Ledger
from casefile.review.accounts import READER_ID, hash_password, password_matches, reader_account

LIMIT = 5
WINDOW_S = 15 * 60
OVERALL_LIMIT = 50
WRONG = "reader id or password is wrong"
_DECOY = hash_password("a password nobody has", salt=b"\0" * 16)  # same work when the id has no account


def stamp(seconds: float) -> str:
    return datetime.fromtimestamp(seconds, UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def _seconds(text: str) -> float:
    return datetime.strptime(text, "%Y-%m-%dT%H:%M:%SZ").replace(tzinfo=UTC).timestamp()


@dataclass(frozen=True)
class SignIn:
    ok: bool
    reader: str | None
    message: str
    recorded_seq: int | None = None


class SignInGuard:
    def __init__(self, ledger: Ledger, *, limit: int = LIMIT, window_s: float = WINDOW_S,
                 overall_limit: int = OVERALL_LIMIT, clock: Callable[[], float] = time.time) -> None:
        self.ledger, self.limit, self.window_s, self.overall_limit = ledger, limit, window_s, overall_limit
        self.clock = clock
        self._by_reader: dict[str, deque[float]] = {}
        self._all: deque[float] = deque()
        since = clock() - window_s
        for e in ledger.entries("sign_in_failed"):
            at = _seconds(e.body["attempted_at"])
            if at > since:
                self._note(e.body["reader"], at)

    def _note(self, reader: str, at: float) -> None:
        self._by_reader.setdefault(reader, deque()).append(at)
        self._all.append(at)

    def _prune(self, now: float) -> None:
        edge = now - self.window_s
        while self._all and self._all[0] <= edge:
            self._all.popleft()
        for reader in list(self._by_reader):
            q = self._by_reader[reader]
            while q and q[0] <= edge:
                q.popleft()
            if not q:
                del self._by_reader[reader]

    def attempt(self, reader_id: str, password: str, client: str) -> SignIn:
        now = self.clock()
        self._prune(now)
        reader_id = (reader_id or "").strip()
        if not READER_ID.fullmatch(reader_id):
            return SignIn(False, None, WRONG)
        mine = self._by_reader.get(reader_id, deque())
        if len(mine) >= self.limit:
            return SignIn(False, None, f"too many failed sign-ins for {reader_id}; try again after "
                                       f"{stamp(mine[0] + self.window_s)} UTC")
        if len(self._all) >= self.overall_limit:
            return SignIn(False, None, f"too many failed sign-ins on this page; try again after "
                                       f"{stamp(self._all[0] + self.window_s)} UTC")
        account = reader_account(self.ledger, reader_id)
        if account is not None and password_matches(account.body["password"], password or ""):
            return SignIn(True, reader_id, f"signed in as {reader_id}")
        if account is None:
            password_matches(_DECOY, password or "")
        count = len(mine) + 1
        body = {"reader": reader_id, "reason": "unknown reader" if account is None else "wrong password",
                "client": client, "attempted_at": stamp(now), "failures_in_window": count}
        if count >= self.limit:
            body["locked_until"] = stamp((mine[0] if mine else now) + self.window_s)
        entry = self.ledger.append("sign_in_failed", body)
        self._note(reader_id, now)
        return SignIn(False, None, WRONG, entry.seq)


__all__ = ["LIMIT", "OVERALL_LIMIT", "WINDOW_S", "WRONG", "SignIn", "SignInGuard", "stamp"]
