"""ASGI middleware of the app: HEAD on every GET route, the request-body size guard, the security headers, the
Host check and the server's time in ``Server-Timing``.

All are plain ASGI (no BaseHTTPMiddleware), so they add no task per request and never buffer responses.
"""

from __future__ import annotations

import asyncio
import json
import time
from collections.abc import Awaitable, Callable, MutableMapping
from typing import Any

from exomap.web.errors import error_body

Scope = MutableMapping[str, Any]
Message = MutableMapping[str, Any]
Receive = Callable[[], Awaitable[Message]]
Send = Callable[[Message], Awaitable[None]]
ASGIApp = Callable[[Scope, Receive, Send], Awaitable[None]]

#: Content-Security-Policy of every answer. Scripts only from this server and no eval: plotly's bundle draws
#: heatmaps and contours without it (its only ``eval``/``new Function`` are fallbacks not reached in a
#: browser). Inline styles are allowed because plotly writes its own <style> element and style attributes.
#: data:/blob: images are plotly's "download as PNG".
CONTENT_SECURITY_POLICY = (
    "default-src 'self'; script-src 'self'; style-src 'self' 'unsafe-inline'; img-src 'self' data: blob:; "
    "font-src 'self' data:; connect-src 'self'; object-src 'none'; base-uri 'none'; "
    "frame-ancestors 'none'; form-action 'self'"
)

SECURITY_HEADERS = (
    (b"x-content-type-options", b"nosniff"),
    (b"x-frame-options", b"DENY"),
    (b"referrer-policy", b"no-referrer"),
    (b"content-security-policy", CONTENT_SECURITY_POLICY.encode("ascii")),
    (b"cross-origin-opener-policy", b"same-origin"),
)


class SecurityHeaders:
    """Add the security headers to every HTTP answer (a route that set one of them keeps its own)."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return

        async def send_with_headers(message: Message) -> None:
            if message["type"] == "http.response.start":
                headers = list(message.get("headers", []))
                present = {k.lower() for k, _ in headers}
                headers.extend((k, v) for k, v in SECURITY_HEADERS if k not in present)
                message["headers"] = headers
            await send(message)

        await self.app(scope, receive, send_with_headers)


async def _send_error(send: Send, status: int, code: str, message: str) -> None:
    body = json.dumps(error_body(status, code, message)).encode("utf-8")
    headers = [
        (b"content-type", b"application/json"),
        (b"content-length", str(len(body)).encode("ascii")),
        (b"connection", b"close"),
    ]
    await send({"type": "http.response.start", "status": status, "headers": headers})
    await send({"type": "http.response.body", "body": body})


class BodyLimit:
    """Refuse request bodies over ``max_bytes`` with 413, whether or not they declare a Content-Length, and
    bodies that take longer than ``timeout_s`` to arrive with 408.

    A declared length over the limit is refused before reading; otherwise the body is read up to the limit
    and replayed to the app (bodies are small: the limit is about a megabyte).
    """

    def __init__(
        self, app: ASGIApp, max_bytes: int, timeout_s: float = 30.0, path_limits: dict[str, int] | None = None
    ) -> None:
        self.app = app
        self.max_bytes = max_bytes
        self.timeout_s = timeout_s
        #: exact paths with a limit of their own (the plant-data upload takes a whole historian export)
        self.path_limits = dict(path_limits or {})

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope.get("method") in ("GET", "HEAD", "OPTIONS"):
            await self.app(scope, receive, send)
            return
        limit = self.path_limits.get(scope.get("path", ""), self.max_bytes)
        too_big = f"the request body is larger than the limit of {limit} bytes"
        for key, value in scope.get("headers", []):
            if key == b"content-length":
                try:
                    declared = int(value)
                except ValueError:
                    await _send_error(send, 400, "bad_request", "the Content-Length header is not a number")
                    return
                if declared > limit:
                    await _send_error(send, 413, "body_too_large", too_big)
                    return
        chunks: list[bytes] = []
        size = 0
        more = True
        try:
            # one deadline for the whole body: a client trickling a few bytes now and then is dropped
            async with asyncio.timeout(self.timeout_s):
                while more:
                    message = await receive()
                    if message["type"] == "http.disconnect":
                        return
                    chunk = message.get("body", b"")
                    size += len(chunk)
                    if size > limit:
                        await _send_error(send, 413, "body_too_large", too_big)
                        return
                    chunks.append(chunk)
                    more = message.get("more_body", False)
        except TimeoutError:
            await _send_error(
                send, 408, "request_timeout", f"the request body did not arrive within {self.timeout_s:g} s"
            )
            return
        body = b"".join(chunks)
        replayed = False

        async def replay() -> Message:
            nonlocal replayed
            if not replayed:
                replayed = True
                return {"type": "http.request", "body": body, "more_body": False}
            return await receive()

        await self.app(scope, replay, send)


class HeadAsGet:
    """Answer ``HEAD`` on every ``GET`` route: the request goes to the app as ``GET`` and the body is dropped,
    so the status and headers (``Content-Length`` included) are those a ``GET`` would get (RFC 9110 §9.3.2).

    FastAPI's routes declare GET only and would answer HEAD with 405. The original method is kept in the scope
    as ``exomap.method`` for messages.
    """

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope.get("method") != "HEAD":
            await self.app(scope, receive, send)
            return
        scope = {**scope, "method": "GET", "exomap.method": "HEAD"}

        async def send_headers_only(message: Message) -> None:
            if message["type"] == "http.response.body":
                if message.get("more_body", False):
                    return  # the final (empty) body message below ends the answer
                message = {"type": "http.response.body", "body": b"", "more_body": False}
            await send(message)

        await self.app(scope, receive, send_headers_only)


#: Host names a loopback server answers to by default (with the address it is bound to).
LOOPBACK_NAMES = ("localhost", "127.0.0.1", "::1")


def allowed_hosts(configured: list[str], bound: str) -> frozenset[str] | None:
    """The host names to accept (lower case, no port); None means any (``*`` configured)."""
    if "*" in configured:
        return None
    names = configured or [*LOOPBACK_NAMES, bound]
    return frozenset(n.strip().lower().strip("[]") for n in names if n.strip() and n not in ("0.0.0.0", "::"))


def host_name(value: str) -> str:
    """The name of a Host header, without its port: ``[::1]:8000`` -> ``::1``, ``Plant.example:80`` ->
    ``plant.example``."""
    value = value.strip().lower()
    if value.startswith("["):
        return value[1 : value.find("]")] if "]" in value else value
    return value.rsplit(":", 1)[0] if value.count(":") == 1 else value


class HostCheck:
    """Refuse requests whose ``Host`` is not one of this server's names (400 ``host_not_allowed``).

    A page on another site can point a name it controls at 127.0.0.1 (DNS rebinding) and then call a
    loopback server as if it were the same origin; the browser still sends that foreign name as ``Host``,
    so answering only our own names closes the hole. Default: the loopback names and the bound address.
    """

    def __init__(self, app: ASGIApp, hosts: frozenset[str] | None) -> None:
        self.app = app
        self.hosts = hosts

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if self.hosts is None or scope["type"] not in ("http", "websocket"):
            await self.app(scope, receive, send)
            return
        host = ""
        for key, value in scope.get("headers", []):
            if key == b"host":
                host = value.decode("latin-1")
                break
        if host_name(host) not in self.hosts:
            shown = host[:100] or "(none)"
            await _send_error(
                send,
                400,
                "host_not_allowed",
                f"this server does not answer to the host name {shown!r}; allowed: "
                f"{', '.join(sorted(self.hosts))} (setting EXOMAP_ALLOWED_HOSTS)",
            )
            return
        await self.app(scope, receive, send)


class ServerTiming:
    """Add ``app;dur=<ms>`` (request received to answer started, in this app) to an answer that already says
    where its time went in ``Server-Timing`` (a computed answer: exomap.web.compression.AnswerResponse), so a
    client can tell the server's time from the network's and its own."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        started = time.monotonic()

        async def send_timed(message: Message) -> None:
            if message["type"] == "http.response.start":
                headers = message.get("headers", [])
                for i, (key, value) in enumerate(headers):
                    if key == b"server-timing":
                        took = b"app;dur=%.2f" % ((time.monotonic() - started) * 1e3)
                        headers = list(headers)
                        headers[i] = (key, value + b", " + took)
                        message["headers"] = headers
                        break
            await send(message)

        await self.app(scope, receive, send_timed)
