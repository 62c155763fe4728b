"""The local service's defences against a web page and a slow client.

- ``HostCheck``: answers only requests whose Host header names this service
  (loopback names, the bound address, SOUNDING_ALLOWED_HOSTS). A page in
  the user's browser that rebinds its own DNS name to 127.0.0.1 sends its
  own name as Host, so it is refused before any route runs.
- ``BodyCap``: every body, whatever its Content-Type (multipart too), is
  read up to SOUNDING_MAX_JSON_BYTES and refused with 413 past it, before
  anything parses it; a declared Content-Length past the cap is refused
  unread. Only the upload endpoint streams its body itself (to disk, under
  SOUNDING_MAX_UPLOAD_BYTES, in routers/imports); here it is refused unread
  when its declared length passes that limit.
- ``GuardedH11Protocol``: uvicorn's h11 protocol with a deadline for a
  request's headers and one for its body. uvicorn's own
  ``timeout_keep_alive`` only covers the idle time between requests and is
  reset by every byte, so a client trickling bytes held a connection open
  indefinitely.
"""

from __future__ import annotations

import asyncio
import json
import logging
from collections.abc import Iterable, Sequence
from typing import Any

import h11
from fastapi import APIRouter
from starlette.types import ASGIApp, Message, Receive, Scope, Send
from uvicorn.protocols.http.h11_impl import H11Protocol

from service.api.admission import TokenFirst
from service.settings import Settings

log = logging.getLogger("sounding.api")

LOOPBACK_NAMES = ("localhost", "127.0.0.1", "::1")


def host_name(header: str) -> str:
    """The name in a Host header, without port or IPv6 brackets (RFC 9110 7.2)."""
    h = header.strip().lower()
    if h.startswith("["):
        h = h[1:].split("]", 1)[0]
    elif h.count(":") == 1:
        h = h.split(":", 1)[0]
    return h.rstrip(".")


async def _answer(send: Send, status: int, error: dict[str, Any]) -> None:
    body = json.dumps({"error": error}).encode()
    await send(
        {
            "type": "http.response.start",
            "status": status,
            "headers": [
                (b"content-type", b"application/json"),
                (b"content-length", str(len(body)).encode()),
                (b"connection", b"close"),
            ],
        }
    )
    await send({"type": "http.response.body", "body": body})


class HostCheck:
    """Refuse requests whose Host header is not one of ``allowed``."""

    def __init__(self, app: ASGIApp, *, allowed: Iterable[str]) -> None:
        self.app = app
        self.allowed = {host_name(h) for h in allowed if h}

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] in ("http", "websocket"):
            header = dict(scope.get("headers") or []).get(b"host")
            # No Host at all (HTTP/1.0, a raw ASGI call) cannot come from a
            # browser, which always names the host it resolved: let it pass.
            if header is not None and host_name(header.decode("latin-1")) not in self.allowed:
                if scope["type"] == "http":
                    await _answer(
                        send,
                        400,
                        {
                            "code": "unknown_host",
                            "message": "this service answers only to its own host names "
                            "(loopback, the address it listens on, SOUNDING_ALLOWED_HOSTS)",
                            "field": "Host",
                        },
                    )
                return
        await self.app(scope, receive, send)


class BodyCap:
    """Refuse a request body past ``limit`` bytes before parsing, whatever its type;
    ``streamed`` maps the paths that stream their own body to their limit."""

    def __init__(self, app: ASGIApp, *, limit: int, streamed: dict[str, int] | None = None) -> None:
        self.app = app
        self.limit = limit
        self.streamed = streamed or {}

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        headers = dict(scope.get("headers") or [])
        declared = headers.get(b"content-length", b"")
        own = self.streamed.get(scope.get("path", ""))
        if own is not None:  # counted chunk by chunk where it is read
            if declared.isdigit() and int(declared) > own:
                await _answer(send, 413, _too_big_error(own, "max_upload_bytes"))
                return
            await self.app(scope, receive, send)
            return
        if declared.isdigit() and int(declared) > self.limit:
            await self._too_big(send)
            return
        chunks: list[bytes] = []
        total = 0
        while True:
            message = await receive()
            if message["type"] == "http.disconnect":
                return
            body = message.get("body", b"")
            total += len(body)
            if total > self.limit:
                await self._too_big(send)
                return
            chunks.append(body)
            if not message.get("more_body", False):
                break
        replayed = False

        async def replay() -> Message:
            nonlocal replayed
            if not replayed:
                replayed = True
                return {"type": "http.request", "body": b"".join(chunks), "more_body": False}
            return await receive()

        await self.app(scope, replay, send)

    async def _too_big(self, send: Send) -> None:
        await _answer(send, 413, _too_big_error(self.limit, "max_json_bytes"))


def _too_big_error(limit: int, setting: str) -> dict[str, Any]:
    return {
        "code": "limit_exceeded",
        "message": f"the request body is larger than {limit} bytes (SOUNDING_{setting.upper()})",
        "limit": setting,
        "maximum": limit,
    }


class GuardedH11Protocol(H11Protocol):
    """uvicorn's h11 protocol with header and body read deadlines."""

    header_timeout: float = 10.0
    body_timeout: float = 120.0

    def connection_made(self, transport: asyncio.Transport) -> None:  # type: ignore[override]
        super().connection_made(transport)
        self._deadline: asyncio.TimerHandle | None = None
        self._reading_body = False
        self._arm(self.header_timeout)

    def _arm(self, seconds: float) -> None:
        self._disarm()
        self._deadline = self.loop.call_later(seconds, self._too_slow)

    def _disarm(self) -> None:
        if getattr(self, "_deadline", None) is not None:
            self._deadline.cancel()  # type: ignore[union-attr]
            self._deadline = None

    def data_received(self, data: bytes) -> None:
        if self._deadline is None and self.conn.their_state is h11.IDLE:
            self._reading_body = False  # the first bytes of the next request
            self._arm(self.header_timeout)
        super().data_received(data)
        state = self.conn.their_state
        if state is h11.SEND_BODY and not self._reading_body:
            self._reading_body = True
            self._arm(self.body_timeout)
        elif state not in (h11.IDLE, h11.SEND_BODY):  # the whole request is in
            self._disarm()

    def connection_lost(self, exc: Exception | None) -> None:
        self._disarm()
        super().connection_lost(exc)

    def _too_slow(self) -> None:
        self._deadline = None
        if self.conn.their_state in (h11.IDLE, h11.SEND_BODY) and not self.transport.is_closing():
            log.warning("closing a connection that did not send its request in time")
            self.transport.close()


def protocol(settings: Settings) -> type[GuardedH11Protocol]:
    """The guarded protocol with this service's deadlines."""
    return type(
        "SoundingH11Protocol",
        (GuardedH11Protocol,),
        {"header_timeout": settings.header_timeout_seconds, "body_timeout": settings.body_timeout_seconds},
    )


def allowed_hosts(settings: Settings, bound: str | None = None) -> list[str]:
    """Host names the service answers: loopback, the bound address, the setting."""
    return [*LOOPBACK_NAMES, *([bound] if bound else []), *settings.allowed_hosts]


# The one endpoint that streams its body itself (to disk, counting as it goes).
STREAMED_PATHS = ("/v1/imports",)


def install(
    app: Any, settings: Settings, *, bound: str | None = None, routers: Sequence[APIRouter] = ()
) -> None:
    """Add the Host check (outermost), the token check of write routes (before
    any body is read) and the body cap to ``app``."""
    app.add_middleware(
        BodyCap,
        limit=settings.max_json_bytes,
        streamed=dict.fromkeys(STREAMED_PATHS, settings.max_upload_bytes),
    )
    app.add_middleware(TokenFirst, routers=routers, settings=settings)
    app.add_middleware(HostCheck, allowed=allowed_hosts(settings, bound))
