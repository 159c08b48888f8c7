"""Sign-in sessions of the review page, kept in the server's memory: random tokens that expire, each with
its own CSRF token. A sign-in form gets a CSRF token too, tied to a short-lived cookie of its own."""

from __future__ import annotations

import hashlib
import hmac
import secrets
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Literal

State = Literal["ok", "none", "expired"]
DEFAULT_MINUTES = 30
KEEP_EXPIRED_S = 24 * 3600  # an expired session is remembered this long, so the page can say it expired


@dataclass
class Session:
    token: str
    reader: str
    csrf: str
    expires: float


class Sessions:
    """Sessions by token. ``clock`` gives seconds (time.time by default; tests move it forward)."""

    def __init__(self, minutes: float = DEFAULT_MINUTES, clock: Callable[[], float] = time.time) -> None:
        if not 0 < minutes <= 24 * 60:
            raise ValueError(f"session length must be above 0 and at most a day, not {minutes} minutes")
        self.seconds = minutes * 60.0
        self.clock = clock
        self._secret = secrets.token_bytes(32)
        self._by_token: dict[str, Session] = {}
        self._lock = threading.Lock()  # the server answers requests on several threads

    def start(self, reader: str) -> Session:
        s = Session(secrets.token_urlsafe(32), reader, secrets.token_urlsafe(32), self.clock() + self.seconds)
        with self._lock:
            self._prune()
            self._by_token[s.token] = s
        return s

    def find(self, token: str | None) -> tuple[State, Session | None]:
        """("ok", session) for a live token; ("expired", None) for one past its time; else ("none", None)."""
        with self._lock:
            s = self._by_token.get(token or "")
        if s is None:
            return "none", None
        if self.clock() >= s.expires:
            return "expired", None
        return "ok", s

    def end(self, token: str) -> None:
        with self._lock:
            self._by_token.pop(token, None)

    def _prune(self) -> None:
        now = self.clock()
        for token in [t for t, s in self._by_token.items() if now >= s.expires + KEEP_EXPIRED_S]:
            del self._by_token[token]

    # ------------------------------------------------------------------ the sign-in form
    def form_token(self, cookie: str) -> str:
        """The CSRF token of the sign-in form for this browser's pre-sign-in cookie."""
        return hmac.new(self._secret, cookie.encode("utf-8"), hashlib.sha256).hexdigest()

    def form_token_ok(self, cookie: str | None, token: str | None) -> bool:
        return bool(cookie) and bool(token) and hmac.compare_digest(self.form_token(cookie or ""), token or "")


def same_token(expected: str, given: str | None) -> bool:
    """A CSRF token compared in constant time; a missing one never matches."""
    return bool(given) and hmac.compare_digest(expected.encode("utf-8"), (given or "").encode("utf-8"))


__all__ = ["DEFAULT_MINUTES", "Session", "Sessions", "State", "same_token"]
