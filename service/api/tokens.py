"""The bearer-token rule, shared by the route dependency and the check that
runs before a request body is read."""

from __future__ import annotations

import hmac
import ipaddress

from models.errors import AuthError
from service.settings import Settings


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


def is_loopback(host: str | None) -> bool:
    """Whether a bound address is reachable only from this machine (RFC 1122
    3.2.1.3, RFC 4291 2.5.3, RFC 6761 6.3); no address (an app built without
    one, as in tests and scripts) counts as loopback."""
    if host is None or host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


def may_record(settings: Settings, bound: str | None, authorization: str | None, *, asked: bool) -> bool:
    """Whether a forecast may go into the track record: always on loopback; off
    loopback only with the token. Asked for explicitly without it is a 401; left
    to the default, the forecast is answered and not recorded."""
    if is_loopback(bound):
        return True
    problem = header_problem(settings, authorization)
    if problem is None:
        return True
    if asked:
        problem.hint = "off loopback, recording into the track record needs the token; or send record=false"
        raise problem
    return False
