"""Passwords, tokens and CSRF.

* Passwords: Argon2id through argon2-cffi (RFC 9106 parameters as the library sets them).
* Instrument/API tokens: 32 random bytes (``secrets``), shown once; only their SHA-256 is
  stored. A fast hash is right for high-entropy tokens (nothing to brute-force), and lets
  a request find its token with one indexed look-up.
* CSRF: a random token per login session, sent back in every form (hidden field
  ``csrf_token``) or htmx request (header ``X-CSRF-Token``) and compared in constant time.
"""

from __future__ import annotations

import hashlib
import hmac
import secrets

from argon2 import PasswordHasher
from argon2.exceptions import InvalidHashError, VerificationError, VerifyMismatchError

TOKEN_PREFIX = "rmn_"
_hasher = PasswordHasher()


def hash_password(password: str) -> str:
    return _hasher.hash(password)


def verify_password(password_hash: str, password: str) -> bool:
    try:
        return _hasher.verify(password_hash, password)
    except (VerifyMismatchError, VerificationError, InvalidHashError):
        return False


def needs_rehash(password_hash: str) -> bool:
    return _hasher.check_needs_rehash(password_hash)


def new_token() -> str:
    return TOKEN_PREFIX + secrets.token_urlsafe(32)


def hash_token(token: str) -> str:
    return hashlib.sha256(token.encode()).hexdigest()


def new_csrf_token() -> str:
    return secrets.token_urlsafe(32)


def same_token(a: str | None, b: str | None) -> bool:
    if not a or not b:
        return False
    return hmac.compare_digest(a.encode(), b.encode())
