"""The token strategy: make a token, digest it, compare digests in constant time.

A token is ``pw_`` plus 43 URL-safe characters (256 random bits). Only ``digest_of(token)`` and
``prefix_of(token)`` are stored; the prefix finds the candidate rows, the digest decides.
"""

import hashlib
import hmac
import secrets

TOKEN_START = "pw_"
PREFIX_CHARS = 8


def make_token() -> str:
    """Return a new random token (shown to its owner once, never stored)."""
    return TOKEN_START + secrets.token_urlsafe(32)


def digest_of(token: str) -> str:
    """Return the hex sha256 of the token; a 256-bit random secret needs no slow password hash."""
    return hashlib.sha256(token.encode("utf-8", "surrogatepass")).hexdigest()


def prefix_of(token: str) -> str:
    """Return the part of the token kept for display and lookup."""
    return token[: len(TOKEN_START) + PREFIX_CHARS]


def looks_like_token(text: str) -> bool:
    return text.startswith(TOKEN_START) and 20 <= len(text) <= 100


def same_digest(stored: str, token: str) -> bool:
    """Return True when the token's digest equals the stored one, compared in constant time."""
    return hmac.compare_digest(stored.encode(), digest_of(token).encode())
