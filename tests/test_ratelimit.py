"""Token buckets against the algorithm's definition (Turner 1986; RFC 2697's committed burst), and the sliding
window of refusals (a log of times: the wait is exactly until the oldest counted one leaves the window)."""

from __future__ import annotations

import pytest

from server.ratelimit import FailureWindow, TokenBuckets


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


def test_failure_window_counts_refusals_and_waits_for_the_oldest_to_expire():
    clock = Clock()
    w = FailureWindow(3, 60.0, clock=clock)
    assert w.wait_s("a") == 0.0  # never refused
    w.record("a")
    clock.t += 10
    w.record("a")
    assert w.wait_s("a") == 0.0  # two of three
    clock.t += 10
    w.record("a")
    assert w.wait_s("a") == pytest.approx(40.0)  # the first (t=1000) leaves at t=1060; now 1020
    assert w.wait_s("b") == 0.0
    clock.t += 40
    assert w.wait_s("a") == 0.0  # two left in the window
    w.record("a")
    assert w.wait_s("a") == pytest.approx(10.0)  # the second (t=1010) leaves at 1070


def test_failure_window_memory_is_bounded():
    clock = Clock()
    w = FailureWindow(2, 60.0, max_keys=3, clock=clock)
    for key in "abcd":
        for _ in range(5):
            w.record(key)
    assert w.wait_s("a") == 0.0  # the least recently refused key was dropped
    assert w.wait_s("d") == pytest.approx(60.0)
    assert all(len(times) <= 2 for times in w._times.values()) and len(w._times) == 3
    with pytest.raises(ValueError):
        FailureWindow(0, 60.0)
