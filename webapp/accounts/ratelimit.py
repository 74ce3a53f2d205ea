"""Count failed sign-ins in the cache; past a few per account or per address, refuse to check more.

A fixed window that starts at the first failure: simple, and enough to turn a password-guessing run
into a handful of guesses per quarter hour. The counters live in the shared cache (Redis in
production), so every gunicorn process sees the same counts.
"""

from __future__ import annotations

import hashlib
import unicodedata

from django.conf import settings
from django.core.cache import cache as default_cache


class LoginThrottle:
    """Failed sign-in counters per user name and per client address."""

    def __init__(self, *, cache=None, window_s: int | None = None, per_user: int | None = None,
                 per_address: int | None = None) -> None:
        self.cache = cache or default_cache
        self.window_s = window_s or settings.PHASEWRIGHT_LOGIN_WINDOW_S
        self.per_user = per_user or settings.PHASEWRIGHT_LOGIN_FAILURES_PER_USER
        self.per_address = per_address or settings.PHASEWRIGHT_LOGIN_FAILURES_PER_ADDRESS

    @staticmethod
    def _key(kind: str, value: str) -> str:
        # Hashed so any user name or address makes a valid, bounded cache key.
        return f"login-failures:{kind}:{hashlib.sha256(counted_name(value).encode()).hexdigest()}"

    def blocked(self, *, username: str, address: str) -> bool:
        """Return True when this user name or address has used up its failures for the window."""
        counts = self.cache.get_many([self._key("user", username), self._key("addr", address)])
        return (counts.get(self._key("user", username), 0) >= self.per_user
                or counts.get(self._key("addr", address), 0) >= self.per_address)

    def failed(self, *, username: str, address: str) -> None:
        """Count one failed sign-in against the user name and the address."""
        for key in (self._key("user", username), self._key("addr", address)):
            self.cache.add(key, 0, timeout=self.window_s)  # starts the window; a no-op when it runs already
            try:
                self.cache.incr(key)
            except ValueError:  # the window ended between add and incr
                self.cache.set(key, 1, timeout=self.window_s)

    def succeeded(self, *, username: str) -> None:
        """Forget the user name's failures after a successful sign-in."""
        self.cache.delete(self._key("user", username))

    def sentence(self) -> str:
        return (f"Too many failed sign-ins for this account or from this address; try again in "
                f"{max(1, round(self.window_s / 60))} minutes.")


def counted_name(username: str) -> str:
    """Return the name failures are counted under: NFKC-normalised (as the sign-in form reads it) and case-folded.

    Full-width, mathematical and ordinal-mark look-alikes sign in to the same account, so they must
    not open a counter of their own.
    """
    return unicodedata.normalize("NFKC", username).strip().casefold()


def client_address(request) -> str:
    """Return the client's address: behind our proxy, the last X-Forwarded-For entry (the one it appended)."""
    if settings.BEHIND_PROXY:
        forwarded = [a.strip() for a in request.META.get("HTTP_X_FORWARDED_FOR", "").split(",") if a.strip()]
        if forwarded:
            return forwarded[-1]
    return request.META.get("REMOTE_ADDR", "")
