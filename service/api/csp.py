"""A Content-Security-Policy on every HTML answer (the review page and /docs).

Everything they load is served by this service itself, so the policy allows
only this origin; /docs starts Swagger UI with one inline script (FastAPI's
page), hence 'unsafe-inline' for scripts and styles there and nothing wider.
"""

from __future__ import annotations

from starlette.types import ASGIApp, Message, Receive, Scope, Send

POLICY = (
    b"default-src 'self'; script-src 'self' 'unsafe-inline'; style-src 'self' 'unsafe-inline'; "
    b"img-src 'self' data:; connect-src 'self'; object-src 'none'; base-uri 'none'; "
    b"frame-ancestors 'none'; form-action 'self'"
)


class ContentSecurityPolicy:
    """Add POLICY to responses whose Content-Type is text/html."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return

        async def with_policy(message: Message) -> None:
            if message["type"] == "http.response.start":
                headers = list(message.get("headers") or [])
                if any(k.lower() == b"content-type" and v.startswith(b"text/html") for k, v in headers):
                    headers.append((b"content-security-policy", POLICY))
                    message = {**message, "headers": headers}
            await send(message)

        await self.app(scope, receive, with_policy)
