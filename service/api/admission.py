"""Authentication before a body is read.

FastAPI reads and parses a request's body before it resolves the route's
dependencies, so a token check written as a dependency ran only after the
whole body was in memory: anyone could make the service read hundreds of
megabytes without a token. This middleware finds the route a request goes to,
and when that route needs write access (``deps.require_token``) it checks the
Authorization header first and answers 401 without reading a byte of the body.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from typing import Any

from fastapi import APIRouter
from fastapi.routing import APIRoute
from starlette.routing import Match
from starlette.types import ASGIApp, Receive, Scope, Send

from service.api.deps import require_token
from service.api.errors import scrub
from service.api.tokens import header_problem
from service.settings import Settings


def _needs_token(dependant: Any) -> bool:
    return any(d.call is require_token or _needs_token(d) for d in dependant.dependencies)


class TokenFirst:
    """Answer 401 before the body is read when a write route's token is missing or wrong."""

    def __init__(self, app: ASGIApp, *, routers: Sequence[APIRouter], settings: Settings) -> None:
        self.app = app
        self.settings = settings
        # A router's routes carry its prefix, and the app includes them without another.
        self.protected = [
            r for rt in routers for r in rt.routes if isinstance(r, APIRoute) and _needs_token(r.dependant)
        ]

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] == "http" and any(r.matches(scope)[0] is Match.FULL for r in self.protected):
            header = dict(scope.get("headers") or []).get(b"authorization")
            problem = header_problem(self.settings, header.decode("latin-1") if header else None)
            if problem is not None:
                body = json.dumps({"error": scrub(problem.to_dict())}).encode()
                await send(
                    {
                        "type": "http.response.start",
                        "status": problem.status,
                        "headers": [
                            (b"content-type", b"application/json"),
                            (b"content-length", str(len(body)).encode()),
                            (b"www-authenticate", b"Bearer"),
                            # The unread body is not drained: the connection ends here.
                            (b"connection", b"close"),
                        ],
                    }
                )
                await send({"type": "http.response.body", "body": body})
                return
        await self.app(scope, receive, send)
