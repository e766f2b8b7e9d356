"""Slow and oversized clients (issue 12, defect 7) against a real uvicorn server with exomap's connection
limits (``exomap.web.protocol``), on a free loopback port in a thread of this process.

Timeouts are set to 1 s here, so each test ends in a few seconds.
"""

from __future__ import annotations

import json
import socket
import threading
import time
from collections.abc import Iterator
from pathlib import Path

import httpx
import pytest
import uvicorn
from exomap.web.app import create_app
from exomap.web.protocol import uvicorn_options
from exomap.web.settings import Settings

TIMEOUT_S = 1.0


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture(scope="module")
def server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[str, int]]:
    settings = Settings(
        data_dir=Path(tmp_path_factory.mktemp("slow")) / "data",
        port=_free_port(),
        executor="thread",
        header_timeout_s=TIMEOUT_S,
        body_timeout_s=TIMEOUT_S,
    )
    config = uvicorn.Config(create_app(settings), log_level="warning", **uvicorn_options(settings))
    srv = uvicorn.Server(config)
    thread = threading.Thread(target=srv.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 30
    while not srv.started:
        assert time.monotonic() < deadline and thread.is_alive(), "the server did not start"
        time.sleep(0.02)
    yield settings.host, settings.port
    srv.should_exit = True
    thread.join(timeout=10)


def _connect(server: tuple[str, int]) -> socket.socket:
    sock = socket.create_connection(server, timeout=10)
    return sock


def _read_all(sock: socket.socket) -> bytes:
    out = b""
    while True:
        try:
            chunk = sock.recv(65536)
        except (ConnectionResetError, TimeoutError):
            break
        if not chunk:
            break
        out += chunk
    return out


def _status(raw: bytes) -> int:
    return int(raw.split(b" ", 2)[1])


def test_trickled_headers_are_cut_off(server) -> None:
    sock = _connect(server)
    t0 = time.monotonic()
    sock.sendall(b"GET /api/v1/health HTTP/1.1\r\nHost: 127.0.0.1\r\n")
    closed = False
    for k in range(40):  # one header line every 0.1 s, never the blank line that ends the head
        try:
            sock.sendall(b"X-Slow-%d: a\r\n" % k)
        except (BrokenPipeError, ConnectionResetError):
            closed = True
            break
        time.sleep(0.1)
        if time.monotonic() - t0 > 3 * TIMEOUT_S:
            break
    raw = b"" if closed else _read_all(sock)
    elapsed = time.monotonic() - t0
    sock.close()
    assert closed or _status(raw) == 408, raw[:200]
    assert elapsed < 3 * TIMEOUT_S, elapsed
    if raw:
        assert json.loads(raw.split(b"\r\n\r\n", 1)[1])["error"]["code"] == "request_timeout"


def test_a_silent_connection_is_closed(server) -> None:
    sock = _connect(server)
    t0 = time.monotonic()
    assert _read_all(sock) == b""  # closed by the server, nothing said
    assert time.monotonic() - t0 < 3 * TIMEOUT_S
    sock.close()


def test_trickled_body_gets_408(server) -> None:
    sock = _connect(server)
    t0 = time.monotonic()
    sock.sendall(
        b"POST /api/v1/scenarios HTTP/1.1\r\nHost: 127.0.0.1\r\nContent-Type: application/json\r\n"
        b"Content-Length: 1000\r\n\r\n"
    )
    sock.settimeout(0.05)
    raw = b""
    while time.monotonic() - t0 < 4 * TIMEOUT_S and not raw:
        try:
            sock.sendall(b"{" + b" " * 9)  # 10 bytes every 0.2 s
        except (BrokenPipeError, ConnectionResetError):
            break
        time.sleep(0.2)
        try:
            raw = sock.recv(65536)
        except TimeoutError:
            pass
    elapsed = time.monotonic() - t0
    sock.close()
    assert _status(raw) == 408, raw[:200]
    assert b'"request_timeout"' in raw
    assert elapsed < 3 * TIMEOUT_S, elapsed


def test_a_1_mb_url_gets_414(server) -> None:
    sock = _connect(server)
    sock.sendall(b"GET /api/v1/health?x=" + b"a" * 1_000_000 + b" HTTP/1.1\r\nHost: 127.0.0.1\r\n\r\n")
    raw = _read_all(sock)
    sock.close()
    assert _status(raw) == 414, raw[:200]
    assert json.loads(raw.split(b"\r\n\r\n", 1)[1])["error"]["code"] == "uri_too_long"


def test_100_kb_of_headers_gets_431(server) -> None:
    sock = _connect(server)
    headers = b"".join(b"X-Big-%d: %s\r\n" % (k, b"b" * 1000) for k in range(100))
    sock.sendall(b"GET /api/v1/health HTTP/1.1\r\nHost: 127.0.0.1\r\n" + headers + b"\r\n")
    raw = _read_all(sock)
    sock.close()
    assert _status(raw) == 431, raw[:200]


def test_ordinary_requests_still_work_on_one_connection(server) -> None:
    host, port = server
    with httpx.Client(base_url=f"http://{host}:{port}", timeout=10) as client:
        for _ in range(3):  # keep-alive: one connection, several requests
            assert client.get("/api/v1/health").json() == {"status": "ok"}
        long_query = "/api/v1/scenarios?limit=" + "0" * 5000 + "1"  # a long but allowed URL
        assert client.get(long_query).status_code == 200
        assert client.head("/api/v1/health").status_code == 200
