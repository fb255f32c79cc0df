"""Slow clients are cut off (issue 12, item 19), against a real server process on 127.0.0.1.

The server runs with short deadlines (headers 1 s, body 2 s, keep-alive 1 s; the defaults are
10, 60 and 5 s) and is served exactly as `remanence serve` serves it (server/serving.py). Raw
sockets play the slow client, a byte-dribbling "slow loris"; every wait is bounded.
"""

from __future__ import annotations

import socket
import time

import httpx
import pytest

from .conftest import ServerProcess

DEADLINES = {"REMANENCE_HEADER_TIMEOUT_S": "1", "REMANENCE_BODY_TIMEOUT_S": "2", "REMANENCE_KEEP_ALIVE_S": "1"}
GIVE_UP_S = 12.0  # a connection still open after this is a failure


@pytest.fixture(scope="module")
def slow_server(tmp_path_factory, sqlite_template):
    import shutil

    tmp_path = tmp_path_factory.mktemp("slow")
    db = tmp_path / "slow.db"
    shutil.copyfile(sqlite_template, db)
    sp = ServerProcess(database_url=f"sqlite:///{db}", data_dir=tmp_path, extra_env=DEADLINES)
    sp.start(timeout_s=120)
    try:
        yield sp
    finally:
        sp.stop()


def _connect(url: str) -> socket.socket:
    host, port = url.removeprefix("http://").split(":")
    assert host == "127.0.0.1"
    sock = socket.create_connection((host, int(port)), timeout=GIVE_UP_S)
    return sock


def _dribble_until_closed(sock: socket.socket, chunks: list[bytes], every_s: float) -> tuple[float, bytes]:
    """Send one chunk every ``every_s`` until the server closes; returns (seconds, bytes received)."""
    t0, got = time.monotonic(), b""
    sock.settimeout(every_s)
    for chunk in chunks:
        if time.monotonic() - t0 > GIVE_UP_S:
            break
        try:
            sock.sendall(chunk)
        except (BrokenPipeError, ConnectionResetError):
            return time.monotonic() - t0, got
        try:
            data = sock.recv(65536)
            if not data:
                return time.monotonic() - t0, got
            got += data
        except socket.timeout:
            continue
        except ConnectionResetError:
            return time.monotonic() - t0, got
    pytest.fail(f"the server kept a slow connection open for {GIVE_UP_S} s; received {got[:200]!r}")


def test_headers_sent_a_byte_at_a_time_are_cut_off(slow_server):
    sock = _connect(slow_server.url)
    try:
        head = b"GET /healthz HTTP/1.1\r\nHost: 127.0.0.1\r\n" + b"X-Slow: " + b"a" * 400
        seconds, got = _dribble_until_closed(sock, [head[i:i + 1] for i in range(len(head))], every_s=0.1)
    finally:
        sock.close()
    assert seconds < 6 and got == b""  # closed about 1 s in, with no answer owed


def test_a_body_that_does_not_arrive_is_answered_408(slow_server):
    sock = _connect(slow_server.url)
    try:
        sock.sendall(b"POST /api/v1/compounds HTTP/1.1\r\nHost: 127.0.0.1\r\nContent-Type: application/json\r\n"
                     b"Content-Length: 4000\r\n\r\n{\"smiles\": \"")
        seconds, got = _dribble_until_closed(sock, [b"C"] * 200, every_s=0.1)
    finally:
        sock.close()
    assert got.startswith(b"HTTP/1.1 408"), got[:200]
    assert 1.5 < seconds < 8


def test_an_idle_kept_alive_connection_is_closed(slow_server):
    sock = _connect(slow_server.url)
    try:
        sock.sendall(b"GET /healthz HTTP/1.1\r\nHost: 127.0.0.1\r\n\r\n")
        t0, got = time.monotonic(), b""
        sock.settimeout(GIVE_UP_S)
        while True:
            data = sock.recv(65536)
            if not data:
                break
            got += data
        seconds = time.monotonic() - t0
    finally:
        sock.close()
    assert got.startswith(b"HTTP/1.1 200")
    assert seconds < 6  # keep-alive 1 s


def test_oversized_incomplete_headers_are_refused(slow_server):
    # 20 KiB of head without its end: past MAX_HEADER_BYTES (16 KiB), h11 gives up on it at once.
    sock = _connect(slow_server.url)
    try:
        sock.sendall(b"GET /healthz HTTP/1.1\r\nHost: 127.0.0.1\r\nX-Big: " + b"a" * 20_000)
        sock.settimeout(GIVE_UP_S)
        got = b""
        while True:
            data = sock.recv(65536)
            if not data:
                break
            got += data
    finally:
        sock.close()
    assert got.startswith(b"HTTP/1.1 400"), got[:200]


def test_many_slow_clients_do_not_starve_a_normal_one(slow_server):
    slow = [_connect(slow_server.url) for _ in range(50)]
    try:
        for s in slow:
            s.sendall(b"GET /healthz HTTP/1.1\r\nHost: 127.0.0.1\r\nX-Slow: a")
        r = httpx.get(f"{slow_server.url}/healthz", timeout=GIVE_UP_S)
        assert r.status_code == 200
        time.sleep(3)  # past the header deadline: every slow connection has been dropped
        for s in slow:
            s.settimeout(GIVE_UP_S)
            try:
                assert s.recv(1024) == b""
            except ConnectionResetError:
                pass
    finally:
        for s in slow:
            s.close()
    assert httpx.get(f"{slow_server.url}/healthz", timeout=GIVE_UP_S).status_code == 200
