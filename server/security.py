"""Passwords, tokens and CSRF.

* Passwords: Argon2id through argon2-cffi (RFC 9106 parameters as the library sets them).
* Instrument/API tokens: 32 random bytes (``secrets``), shown once; only their SHA-256 is
  stored. A fast hash is right for high-entropy tokens (nothing to brute-force), and lets
  a request find its token with one indexed look-up.
* Unknown user names are checked against a dummy Argon2id hash made with the same parameters,
  so a login costs one hash whether the name exists or not (no user-name oracle in the timing).
* Browser sessions: the cookie carries 32 random bytes; the server keeps only their SHA-256
  (``server/services/sessions.py``).
* CSRF: a random token per login session, sent back in every form (hidden field
  ``csrf_token``) or htmx request (header ``X-CSRF-Token``) and compared in constant time.
  Before login, the token is an HMAC of a random nonce held in a cookie (the "signed double-submit
  cookie" of the OWASP CSRF Prevention Cheat Sheet), so anonymous visitors cost no database row.
  Pages are served gzip-compressed, so a secret repeated in every page next to reflected input
  (a search box) could be guessed a byte at a time from response sizes (BREACH, Gluck, Harris and
  Prado, Black Hat USA 2013). The token is therefore masked afresh for every response
  (:func:`mask_token`: a random pad and the token XOR the pad, the mitigation the BREACH paper
  names "randomizing secrets per request"); :func:`unmask_token` recovers it for the comparison.
* Known-device marks: after a successful login the browser gets a long-lived cookie
  ``nonce.issued.tag`` whose tag is an HMAC-SHA256 (RFC 2104) over the account id, the current
  password hash, the nonce and the issue time. It names no account; a password change voids it.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import secrets
import time
from functools import lru_cache

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


@lru_cache(maxsize=1)
def _dummy_hash() -> str:
    # Made once per process with the live parameters, so its verify costs what a real one costs.
    return _hasher.hash(secrets.token_urlsafe(16))


def verify_dummy(password: str) -> bool:
    """Spend one Argon2id verification on a name that has no account (always False)."""
    verify_password(_dummy_hash(), password)
    return False


def needs_rehash(password_hash: str) -> bool:
    return _hasher.check_needs_rehash(password_hash)


def new_token() -> str:
    return TOKEN_PREFIX + secrets.token_urlsafe(32)


def hash_token(token: str) -> str:
    return hashlib.sha256(token.encode()).hexdigest()


def new_csrf_token() -> str:
    return secrets.token_urlsafe(32)


def mask_token(token: str) -> str:
    """``token`` masked with a fresh random pad: ``base64url(pad || pad XOR token)``; differs every call."""
    raw = token.encode()
    pad = secrets.token_bytes(len(raw))
    return base64.urlsafe_b64encode(pad + bytes(a ^ b for a, b in zip(pad, raw))).rstrip(b"=").decode()


def unmask_token(masked: str | None) -> str | None:
    """The token inside a :func:`mask_token` value; None for anything that is not one."""
    if not masked or len(masked) > 256:
        return None
    try:
        data = base64.urlsafe_b64decode(masked + "=" * (-len(masked) % 4))
    except (ValueError, TypeError):
        return None
    half = len(data) // 2
    if not half or len(data) % 2:
        return None
    try:
        return bytes(a ^ b for a, b in zip(data[:half], data[half:])).decode("ascii")
    except UnicodeDecodeError:
        return None


def same_token(a: str | None, b: str | None) -> bool:
    if not a or not b:
        return False
    return hmac.compare_digest(a.encode(), b.encode())


def new_session_id() -> str:
    return secrets.token_urlsafe(32)


def _tag(secret_key: str, *parts: object) -> str:
    msg = "|".join(str(p) for p in parts).encode()
    digest = hmac.new(secret_key.encode(), msg, hashlib.sha256).digest()
    return base64.urlsafe_b64encode(digest).rstrip(b"=").decode()


def prelogin_csrf(secret_key: str, nonce: str) -> str:
    """The CSRF token of a visitor who is not logged in: an HMAC of the nonce in their cookie."""
    return _tag(secret_key, "csrf", nonce)


def device_mark(secret_key: str, user_id: int, password_hash: str, *, now_s: float | None = None) -> str:
    nonce = secrets.token_urlsafe(18)
    issued = int(time.time() if now_s is None else now_s)
    return f"{nonce}.{issued}.{_tag(secret_key, 'device', user_id, password_hash, nonce, issued)}"


def device_nonce(mark: str | None, secret_key: str, user_id: int, password_hash: str, *, max_age_s: float,
                 now_s: float | None = None) -> str | None:
    """The nonce of a known-device mark that this account issued and that is younger than ``max_age_s``; else None."""
    if not mark or len(mark) > 200:
        return None
    nonce, _, rest = mark.partition(".")
    issued_text, _, tag = rest.partition(".")
    if not nonce or not issued_text.isdigit() or not tag:
        return None
    issued = int(issued_text)
    now = time.time() if now_s is None else now_s
    if not (0 <= now - issued <= max_age_s):
        return None
    if not same_token(tag, _tag(secret_key, "device", user_id, password_hash, nonce, issued)):
        return None
    return nonce
