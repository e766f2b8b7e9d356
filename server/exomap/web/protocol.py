"""The HTTP/1.1 connection handling of ``exomap serve``: uvicorn's h11 protocol with limits on slow and
oversized request heads.

uvicorn drops a connection idle *between* requests (``timeout_keep_alive``) but not one that trickles a
request head byte by byte, nor one that connects and sends nothing: a few hundred such clients hold the
server's connections for as long as they like. ``GuardedH11Protocol`` adds:

* a header timeout: the request line and headers must arrive within ``header_timeout_s`` of the first byte
  (or of the connection); past it the answer is 408 and the connection is closed;
* a request line longer than ``max_url_bytes`` is answered 414 (URI Too Long) as soon as that many bytes have
  come without its end, and a head longer than ``max_header_bytes`` 431 (Request Header Fields Too Large),
  before h11 would answer a vague 400.

The body has its own deadline in the app (``exomap.web.middleware.BodyLimit``, ``body_timeout_s``), which
answers 408 too. Answers use the API's one error shape.
"""

from __future__ import annotations

import asyncio
import json
from typing import Any

import h11
from uvicorn.protocols.http.h11_impl import H11Protocol

from exomap.web.errors import error_body

REASONS = {408: b"Request Timeout", 414: b"URI Too Long", 431: b"Request Header Fields Too Large"}


def _refusal(status: int, code: str, message: str) -> bytes:
    body = json.dumps(error_body(status, code, message)).encode("utf-8")
    head = b"HTTP/1.1 %d %s\r\ncontent-type: application/json\r\ncontent-length: %d\r\nconnection: close\r\n\r\n" % (
        status,
        REASONS[status],
        len(body),
    )
    return head + body


class GuardedH11Protocol(H11Protocol):
    """uvicorn's h11 protocol with a header timeout and early 414/431 (limits set by ``guarded_protocol``)."""

    header_timeout_s: float = 10.0
    max_url_bytes: int = 32_768
    max_header_bytes: int = 65_536

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._head_timer: asyncio.TimerHandle | None = None
        self._head = bytearray()

    def connection_made(self, transport: asyncio.Transport) -> None:  # type: ignore[override]
        super().connection_made(transport)
        self._arm()

    def connection_lost(self, exc: Exception | None) -> None:
        self._disarm()
        super().connection_lost(exc)

    def data_received(self, data: bytes) -> None:
        if self.conn.their_state is h11.IDLE:  # (still) waiting for a request line and headers
            if self._head_timer is None:
                self._arm()
            self._head += data[: self.max_header_bytes + 1]
            if self._too_large():
                return
        super().data_received(data)
        if self.conn.their_state is not h11.IDLE:  # the head is complete: the request is the app's now
            self._disarm()
            self._head.clear()

    # -- limits --------------------------------------------------------------------------------------------------
    def _too_large(self) -> bool:
        if len(self._head) <= min(self.max_url_bytes, self.max_header_bytes):
            return False  # the usual case, decided without scanning the bytes
        head = self._head.lstrip(b"\r\n")  # RFC 9112 §2.2: empty lines before a request line are ignored
        end = head.find(b"\r\n")
        line = end if end >= 0 else len(head)
        if line > self.max_url_bytes:
            self._refuse(414, "uri_too_long", f"the request line is longer than {self.max_url_bytes} bytes")
            return True
        if b"\r\n\r\n" not in head and len(head) > self.max_header_bytes:
            self._refuse(431, "headers_too_large", f"the request head is larger than {self.max_header_bytes} bytes")
            return True
        return False

    def _arm(self) -> None:
        self._disarm()
        self._head_timer = self.loop.call_later(self.header_timeout_s, self._head_timed_out)

    def _disarm(self) -> None:
        if self._head_timer is not None:
            self._head_timer.cancel()
            self._head_timer = None

    def _head_timed_out(self) -> None:
        self._head_timer = None
        if self.transport.is_closing() or self.conn.their_state is not h11.IDLE:
            return
        if self._head.strip():
            self._refuse(408, "request_timeout", f"the request head did not arrive within {self.header_timeout_s:g} s")
        else:  # nothing was said on this connection: just close it
            self.transport.close()

    def _refuse(self, status: int, code: str, message: str) -> None:
        self._disarm()
        self._head.clear()
        self.logger.warning("refused a request head: %s", message)
        self.transport.write(_refusal(status, code, message))
        self.transport.close()


def guarded_protocol(header_timeout_s: float, max_url_bytes: int, max_header_bytes: int) -> type[GuardedH11Protocol]:
    """A ``GuardedH11Protocol`` class with these limits (uvicorn takes a protocol class, not an instance)."""
    return type(
        "GuardedH11Protocol",
        (GuardedH11Protocol,),
        {"header_timeout_s": header_timeout_s, "max_url_bytes": max_url_bytes, "max_header_bytes": max_header_bytes},
    )


def uvicorn_options(settings: Any) -> dict[str, Any]:
    """The keyword arguments of ``uvicorn.run``/``uvicorn.Config`` that carry the settings' connection limits."""
    return {
        "host": settings.host,
        "port": settings.port,
        "http": guarded_protocol(settings.header_timeout_s, settings.max_url_bytes, settings.max_header_bytes),
        # h11's own buffer limit sits just above ours, so our 414/431 answer first
        "h11_max_incomplete_event_size": settings.max_header_bytes + 1024,
        "timeout_keep_alive": 5,
        "proxy_headers": False,
    }
