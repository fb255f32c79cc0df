"""Token buckets against the algorithm's definition (Turner 1986; RFC 2697's committed burst)."""

from __future__ import annotations

import pytest

from server.ratelimit import TokenBuckets


class Clock:
    def __init__(self) -> None:
        self.t = 1000.0

    def __call__(self) -> float:
        return self.t


def test_burst_then_sustained_rate():
    clock = Clock()
    b = TokenBuckets(per_minute=30, burst=5, clock=clock)  # one token every 2 s
    assert [b.take("a") for _ in range(5)] == [0.0] * 5
    assert b.take("a") == pytest.approx(2.0)  # empty: wait for one token
    clock.t += 1.0
    assert b.take("a") == pytest.approx(1.0)  # half a token so far
    clock.t += 1.0
    assert b.take("a") == 0.0
    clock.t += 3600
    assert [b.take("a") for _ in range(6)].count(0.0) == 5  # refills to the burst, never beyond


def test_keys_are_independent_and_memory_is_bounded():
    clock = Clock()
    b = TokenBuckets(per_minute=60, burst=1, max_keys=100, clock=clock)
    assert b.take("a") == 0.0 and b.take("a") > 0
    assert b.take("b") == 0.0
    for i in range(1000):
        b.take(f"k{i}")
    assert len(b._buckets) <= 100


def test_bad_parameters_are_refused():
    with pytest.raises(ValueError):
        TokenBuckets(per_minute=0, burst=1)
    with pytest.raises(ValueError):
        TokenBuckets(per_minute=10, burst=0)
