"""The bearer-token rule, shared by the route dependency and the check that
runs before a request body is read."""

from __future__ import annotations

import hmac

from models.errors import AuthError

from ..settings import Settings


def token_problem(settings: Settings, scheme: str | None, credentials: str | None) -> AuthError | None:
    """Why a request's credentials do not grant write access, or None when they do."""
    expected = settings.token.get_secret_value() if settings.token else ""
    if not expected.strip():
        return AuthError(
            "changes over HTTP are switched off: the server has no SOUNDING_TOKEN",
            hint="start the service with SOUNDING_TOKEN set",
        )
    if scheme is None or credentials is None or scheme.lower() != "bearer":
        return AuthError("this endpoint changes data and needs 'Authorization: Bearer <token>'")
    # Constant-time comparison, so the token cannot be guessed byte by byte.
    if not hmac.compare_digest(credentials.encode(), expected.encode()):
        return AuthError("the bearer token is wrong")
    return None


def header_problem(settings: Settings, authorization: str | None) -> AuthError | None:
    """``token_problem`` of a raw Authorization header (RFC 6750 2.1)."""
    scheme, _, credentials = (authorization or "").strip().partition(" ")
    return token_problem(settings, scheme or None, credentials.strip() or None)
