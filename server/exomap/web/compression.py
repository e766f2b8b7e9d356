"""When answers are compressed: for clients across a network, not for clients on this machine.

gzip trades CPU time for bytes on the wire. Across a network that pays (a 200 x 200 map is 0.75 MB of JSON and
0.17 MB gzipped: 60 ms against 14 ms at 100 Mbit/s). Over the loopback interface it does not: the 0.75 MB
cross in well under a millisecond, while compressing them costs the server 1.5 ms (ISA-L, level 1; 6 ms with
zlib) and decompressing costs the client about 2 ms, on the critical path of every answer
(benchmarks/bench_http_map.py measures both paths). So a client connecting from a loopback address is sent
the plain body even when it accepts gzip, unless the request came through a proxy (a ``Forwarded``,
``X-Forwarded-For``, ``X-Real-IP`` or ``Via`` header): a reverse proxy on this machine relays to clients
elsewhere, and the compressed form is what it should get.

``NetworkGZip`` applies this to every answer of the app (wrapping Starlette's ``GZipMiddleware``);
``AnswerResponse`` to computation answers, whose gzip form is made once per cached answer and kept.
"""

from __future__ import annotations

import functools
import ipaddress
import time
from collections.abc import Mapping
from typing import Any

import anyio.to_thread
from starlette.middleware.gzip import GZipMiddleware
from starlette.responses import Response

from exomap.web.jobs import Answer
from exomap.web.middleware import ASGIApp, Receive, Scope, Send

#: Request headers a proxy adds: a request carrying one was relayed for a client that may be elsewhere.
PROXY_HEADERS = (b"forwarded", b"x-forwarded-for", b"x-real-ip", b"via")


def local_client(scope: Scope) -> bool:
    """True when the request's peer is a loopback address and no proxy relayed it."""
    client = scope.get("client")
    if not client or not _loopback(str(client[0])):
        return False
    return not any(key in PROXY_HEADERS for key, _ in scope.get("headers", ()))


@functools.lru_cache(maxsize=256)
def _loopback(host: str) -> bool:
    try:
        address = ipaddress.ip_address(host.split("%", 1)[0])
    except ValueError:  # a name rather than an address (a test client, a Unix socket path)
        return False
    mapped = getattr(address, "ipv4_mapped", None)  # ::ffff:127.0.0.1 from a dual-stack socket
    return (mapped or address).is_loopback


def accepts_gzip(headers: Mapping[str, str]) -> bool:
    """True when ``Accept-Encoding`` lists gzip with a non-zero quality."""
    for item in headers.get("accept-encoding", "").split(","):
        coding, _, params = item.strip().partition(";")
        if coding.strip().lower() == "gzip":
            return params.replace(" ", "") not in ("q=0", "q=0.0", "q=0.00", "q=0.000")
    return False


class NetworkGZip:
    """Starlette's ``GZipMiddleware`` for clients across a network; answers to a local client go as they are."""

    def __init__(self, app: ASGIApp, minimum_size: int = 1000) -> None:
        self.app = app
        self.compressing = GZipMiddleware(app, minimum_size=minimum_size)

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] == "http" and local_client(scope):
            await self.app(scope, receive, send)
        else:
            await self.compressing(scope, receive, send)


class AnswerResponse(Response):
    """A computation's answer: its body, or its gzip form for a client across a network that accepts gzip.

    The gzip form is made at send time, off the event loop, on the first request that needs it, and kept with
    the (cached) answer. A computed answer (not from the cache) carries a ``Server-Timing`` header: where the
    time of its computation went, in milliseconds (``dispatch``: waiting for a worker and handing the job over;
    ``compute``: the core; ``encode``: the answer document to JSON; ``return``: the answer back from the worker;
    ``gzip``: compressing it here).
    """

    def __init__(self, answer: Answer, *, compress: bool, hit: bool, media_type: str, headers: dict[str, str]):
        self.answer = answer
        self.compress = compress and answer.compressible
        self.timing = () if hit else answer.timing
        super().__init__(b"", media_type=media_type, headers=headers)

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        timing = list(self.timing)
        if self.compress:
            if self.answer.gz is None:
                started = time.monotonic()
                await anyio.to_thread.run_sync(self.answer.gzipped)
                timing.append(("gzip", time.monotonic() - started))
            self.body = self.answer.gzipped()
            self.headers["content-encoding"] = "gzip"
        else:
            self.body = self.answer.body
        self.headers["content-length"] = str(len(self.body))
        if timing:
            self.headers["server-timing"] = server_timing(timing)
        await super().__call__(scope, receive, send)


def server_timing(phases: Any) -> str:
    """A ``Server-Timing`` header value: ``name;dur=<milliseconds>`` per phase."""
    return ", ".join(f"{name};dur={seconds * 1e3:.2f}" for name, seconds in phases)
