"""Slow and oversized clients cannot stall the served dashboard for everyone else.

A served dashboard (default worker count) is sent, on loopback, 50 connections that each trickle a
request one line per second (no token needed for that): half trickle the head, half send a head
declaring a 64 KiB body and trickle the body. While they are open, ordinary
requests must still be answered. The bound asserted is functional, not a benchmark: on an idle
machine an answer takes milliseconds, and before the fix none came at all while the trickling
lasted (every worker thread sat reading a trickled head). The bound is the issue's 2 s; measured
answers were 9–38 ms. The trickling connections themselves are closed once
`dashboard.app.HEAD_TIMEOUT` (plus, for a declared body, its length at `MIN_BODY_RATE`) has
passed. A request body over `MAX_REQUEST_BYTES` is refused 413.

Run with ``-s`` to see the measured latencies.
"""

from __future__ import annotations

import json
import socket
import threading
import time
import urllib.error
import urllib.request
from collections.abc import Iterator
from pathlib import Path

import pytest

from dashboard.app import HEAD_TIMEOUT, MAX_REQUEST_BYTES

from ._served import Served, stop_all
from ._snapshot import write_snapshot

SLOW_CLIENTS = 50
TRICKLE_SECONDS = 30.0  # how long each slow client keeps trickling if the server lets it
ANSWER_BOUND = 2.0  # s, the bound; see the module docstring


@pytest.fixture(autouse=True)
def _no_server_left() -> Iterator[None]:
    yield
    stop_all()


@pytest.fixture(scope="module")
def small_snapshot(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return write_snapshot(tmp_path_factory.mktemp("slow") / "a.duckdb", T=260, window=120, step=20)


class Trickler:
    """`count` sockets that trickle a request one line per second, on their own thread: the even
    ones a head, the odd ones the body of a request whose head declared 64 KiB."""

    def __init__(self, port: int, count: int) -> None:
        self.socks = [socket.create_connection(("127.0.0.1", port), timeout=5) for _ in range(count)]
        self.closed_after: list[float] = []  # seconds until the server closed each socket
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)
        self._thread.start()

    def _run(self) -> None:
        start = time.monotonic()
        for i, s in enumerate(self.socks):
            if i % 2:
                s.sendall(b"POST /_dash-update-component HTTP/1.1\r\nHost: 127.0.0.1\r\nContent-Length: 65536\r\n\r\n")
            else:
                s.sendall(b"GET / HTTP/1.1\r\nHost: 127.0.0.1\r\n")
        open_socks = list(self.socks)
        line = 0
        while open_socks and not self._stop.wait(1.0) and time.monotonic() - start < TRICKLE_SECONDS:
            line += 1
            for s in list(open_socks):
                try:
                    s.sendall(f"X-Slow-{line}: {'a' * 20}\r\n".encode())
                except OSError:  # the server closed it
                    self.closed_after.append(time.monotonic() - start)
                    open_socks.remove(s)

    def stop(self) -> None:
        self._stop.set()
        self._thread.join(TRICKLE_SECONDS + 10)
        for s in self.socks:
            s.close()


def timed_get(url: str) -> float:
    start = time.monotonic()
    with urllib.request.urlopen(url, timeout=ANSWER_BOUND) as r:
        assert r.status == 200
        r.read()
    return time.monotonic() - start


def test_ordinary_requests_are_answered_while_fifty_clients_trickle_headers(small_snapshot: Path) -> None:
    served = Served(small_snapshot, workers=None)
    timed_get(served.base)  # started and answering
    trickler = Trickler(served.port, SLOW_CLIENTS)
    try:
        time.sleep(2.0)  # every slow client has sent its first lines
        latencies = []
        for _ in range(6):
            try:
                latencies.append(timed_get(served.base + "_dash-layout"))
            except (TimeoutError, urllib.error.URLError) as exc:
                pytest.fail(f"no answer within {ANSWER_BOUND} s while {SLOW_CLIENTS} clients trickle headers: {exc}")
            time.sleep(0.5)
        print(f"\nlatencies with {SLOW_CLIENTS} trickling clients (s): {[round(x, 3) for x in latencies]}")
        deadline = time.monotonic() + 2 * HEAD_TIMEOUT + 15
        while len(trickler.closed_after) < SLOW_CLIENTS and time.monotonic() < deadline:
            time.sleep(0.5)
    finally:
        trickler.stop()
        served.stop()
    assert max(latencies) < ANSWER_BOUND
    # the server gave up on every trickled request, and not before its timeout
    assert len(trickler.closed_after) == SLOW_CLIENTS, trickler.closed_after
    assert min(trickler.closed_after) >= HEAD_TIMEOUT - 1, trickler.closed_after


def test_a_request_body_over_the_limit_is_refused_413(small_snapshot: Path) -> None:
    served = Served(small_snapshot, workers=1)
    head = (
        "POST /_dash-update-component HTTP/1.1\r\nHost: 127.0.0.1\r\nContent-Type: application/json\r\n"
        f"Content-Length: {MAX_REQUEST_BYTES + 1}\r\nConnection: close\r\n\r\n"
    ).encode()
    try:
        with socket.create_connection(("127.0.0.1", served.port), timeout=30) as s:
            s.sendall(head + b'{"output": "' + b"a" * 1000)  # answered before the body is all sent
            answer = b""
            while chunk := s.recv(65536):
                answer += chunk
        assert answer.startswith(b"HTTP/1.1 413"), answer[:300]
        assert timed_get(served.base) < ANSWER_BOUND  # and the worker still answers
    finally:
        served.stop()


def test_a_client_waiting_for_100_continue_gets_it_and_its_answer(small_snapshot: Path) -> None:
    """The request is read before a thread takes it, so the 100 Continue a client may wait for
    before sending its body comes from the reading loop (curl waits for it on large bodies)."""
    served = Served(small_snapshot, workers=1)
    key = '{"chart":["MATCH"],"type":"csv-download"}.data'
    body = json.dumps({  # the CSV download callback (see test_app.py), a small valid request
        "output": key,
        "outputs": {"id": {"chart": "paths", "type": "csv-download"}, "property": "data"},
        "inputs": [{"id": {"chart": "paths", "type": "csv-button"}, "property": "n_clicks", "value": 1}],
        "state": [
            {"id": {"chart": "paths", "type": "chart-data"}, "property": "data", "value": [{"a": 1.0}]},
            {"id": "window-state", "property": "data", "value": {}},
        ],
        "changedPropIds": ['{"chart":"paths","type":"csv-button"}.n_clicks'],
    }).encode()  # fmt: skip
    head = (
        f"POST /_dash-update-component HTTP/1.1\r\nHost: 127.0.0.1\r\nContent-Type: application/json\r\n"
        f"Content-Length: {len(body)}\r\nExpect: 100-continue\r\nConnection: close\r\n\r\n"
    ).encode()
    try:
        with socket.create_connection(("127.0.0.1", served.port), timeout=30) as s:
            s.sendall(head)
            assert s.recv(64).startswith(b"HTTP/1.1 100 Continue")
            s.sendall(body)
            answer = b""
            while chunk := s.recv(65536):
                answer += chunk
        assert b"HTTP/1.1 200" in answer and b"a\\n1.0\\n" in answer, answer[:500]
    finally:
        served.stop()


def test_a_request_sent_a_byte_at_a_time_is_answered(small_snapshot: Path) -> None:
    """The end of the head is found across chunk boundaries (the reading loop searches only what
    is new, plus the three bytes before it)."""
    served = Served(small_snapshot, workers=1)
    request = b"GET /_dash-layout HTTP/1.1\r\nHost: 127.0.0.1\r\nX-Pad: " + b"p" * 300 + b"\r\nConnection: close\r\n\r\n"
    try:
        with socket.create_connection(("127.0.0.1", served.port), timeout=30) as s:
            s.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
            for i in range(len(request)):
                s.sendall(request[i : i + 1])
                if request[i : i + 1] in (b"\r", b"\n"):
                    time.sleep(0.005)  # let the line breaks arrive in separate segments
            answer = b""
            while chunk := s.recv(65536):
                answer += chunk
        assert answer.startswith(b"HTTP/1.1 200"), answer[:300]
    finally:
        served.stop()
