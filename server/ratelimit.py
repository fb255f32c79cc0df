"""Per-caller rate limits: a token bucket per key, in this process's memory.

A bucket holds at most ``burst`` tokens and gains ``per_minute / 60`` tokens a second; a
request that finds less than one token is refused with the seconds to wait (token-bucket
algorithm: J. Turner, "New directions in communications (or which way to the information
age?)", IEEE Commun. Mag. 24(10), 8 (1986); the same shaping as RFC 2697's committed
burst). Buckets live in one process: with several ``remanence serve`` processes behind a
proxy, each process keeps its own, so a caller's allowance is per process (the proxy's own
limits, if any, bound the total).

The key of a caller (:func:`caller_key`): the API token (its SHA-256, never the token), else
the logged-in account of the session cookie, else the client address as the server sees it
(behind a reverse proxy, uvicorn's ``--forwarded-allow-ips`` makes that the real client).
"""

from __future__ import annotations

import hashlib
import threading
import time
from collections import deque
from dataclasses import dataclass

from starlette.requests import Request

__all__ = ["TokenBuckets", "FailureWindow", "caller_key"]


@dataclass
class _Bucket:
    tokens: float
    at: float


class TokenBuckets:
    """Token buckets keyed by caller; thread-safe, memory bounded by ``max_keys``.

    Parameters
    ----------
    per_minute : float
        Sustained rate, requests per minute.
    burst : int
        Requests allowed at once from a full bucket.
    max_keys : int
        Buckets kept; past it, the full ones are dropped first (a full bucket is the same as
        no bucket), then the least recently used.
    """

    def __init__(self, per_minute: float, burst: int, *, max_keys: int = 10_000, clock=time.monotonic) -> None:
        if per_minute <= 0 or burst < 1:
            raise ValueError("per_minute must be positive and burst at least 1")
        self.rate_per_s = per_minute / 60.0
        self.burst = float(burst)
        self.max_keys = max_keys
        self._clock = clock
        self._lock = threading.Lock()
        self._buckets: dict[str, _Bucket] = {}

    def take(self, key: str) -> float:
        """Take one token for ``key``: 0.0 when allowed, else the seconds until one is there."""
        now = self._clock()
        with self._lock:
            bucket = self._buckets.pop(key, None) or _Bucket(self.burst, now)
            bucket.tokens = min(self.burst, bucket.tokens + (now - bucket.at) * self.rate_per_s)
            bucket.at = now
            self._buckets[key] = bucket  # re-inserted: the dict's order is least recently used first
            if len(self._buckets) > self.max_keys:
                self._prune(now)
            if bucket.tokens >= 1.0:
                bucket.tokens -= 1.0
                return 0.0
            return (1.0 - bucket.tokens) / self.rate_per_s

    def _prune(self, now: float) -> None:
        full = [k for k, b in self._buckets.items() if b.tokens + (now - b.at) * self.rate_per_s >= self.burst]
        for k in full:
            del self._buckets[k]
        while len(self._buckets) > self.max_keys:
            del self._buckets[next(iter(self._buckets))]


class FailureWindow:
    """Refusals counted per caller over a sliding window: past ``limit`` in ``window_s`` seconds,
    the caller waits until the oldest one leaves the window (a sliding-window log; each key keeps at
    most ``limit`` times, so memory is bounded by ``limit * max_keys``).

    Used for uploads: refused files are not stored, so without it the same bad bytes could be sent
    (and read, and analysed up to their budget) again and again. Successes are never recorded.
    """

    def __init__(self, limit: int, window_s: float, *, max_keys: int = 10_000, clock=time.monotonic) -> None:
        if limit < 1 or window_s <= 0:
            raise ValueError("limit must be at least 1 and window_s positive")
        self.limit = limit
        self.window_s = window_s
        self.max_keys = max_keys
        self._clock = clock
        self._lock = threading.Lock()
        self._times: dict[str, deque[float]] = {}

    def wait_s(self, key: str) -> float:
        """0.0 when ``key`` may try now, else the seconds until its oldest counted refusal expires."""
        now = self._clock()
        with self._lock:
            times = self._times.get(key)
            if times is None:
                return 0.0
            while times and times[0] <= now - self.window_s:
                times.popleft()
            if not times:
                del self._times[key]
                return 0.0
            return times[0] + self.window_s - now if len(times) >= self.limit else 0.0

    def record(self, key: str) -> None:
        """Count one refusal of ``key`` now."""
        now = self._clock()
        with self._lock:
            times = self._times.pop(key, None) or deque(maxlen=self.limit)
            times.append(now)
            self._times[key] = times  # re-inserted: least recently refused first
            while len(self._times) > self.max_keys:
                del self._times[next(iter(self._times))]


def caller_key(request: Request) -> str:
    """Who is asking: ``token:<sha256>``, ``session:<sha256>`` or ``client:<address>``."""
    auth = request.headers.get("authorization", "")
    scheme, _, credential = auth.partition(" ")
    if scheme.lower() == "bearer" and credential.strip():
        return "token:" + hashlib.sha256(credential.strip().encode()).hexdigest()
    # A login session (server/cookies.py): the cookie holds a random id. A made-up cookie gets a bucket of its own,
    # but it also gets no search: pages and the API refuse it before any matching is done.
    cookie = request.cookies.get("remanence_session")
    if cookie:
        return "session:" + hashlib.sha256(cookie.encode()).hexdigest()
    client = request.client
    return f"client:{client.host if client else 'unknown'}"
