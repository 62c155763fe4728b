"""The one place where library errors become HTTP answers.

Every error body has the same shape, ``{"error": {"code", "message", ...}}``,
whether it comes from our own exceptions, from request validation or from
an unexpected bug (which answers 500 without leaking a traceback).
"""

from __future__ import annotations

import logging
import re
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from starlette.exceptions import HTTPException as StarletteHTTPException

from models.errors import AuthError, SoundingError
from service.storage.handles import HANDLE_PATTERN, HANDLE_RULE

log = logging.getLogger("sounding.api")

#: The rules behind the API's patterns, in words: a regular expression is
#: no answer to someone who mistyped a handle.
PATTERN_WORDS = {
    HANDLE_PATTERN: f"a handle is {HANDLE_RULE}",
    r"\S": "it must not be blank",
}


def _message(error: dict[str, Any]) -> str:
    pattern = str((error.get("ctx") or {}).get("pattern"))
    words = PATTERN_WORDS.get(pattern) if error.get("type") == "string_pattern_mismatch" else None
    if words is None:
        return str(error.get("msg", "invalid"))
    return f"{words} (got {error.get('input')!r})"


def status_for(exc: SoundingError) -> int:
    """The HTTP status of an error: its class states it (models.errors)."""
    return exc.status


# An absolute path of two or more parts (not a URL, not a date like 2026/01/02).
_PATH = re.compile(r"(?<![\w.:/~-])(?:/[\w.@%+~-]+){2,}/?")


_SQLITE = re.compile(r"(sqlite[+\w]*:///)/?[^\s'\"?]*/")


def scrub(body: dict[str, Any]) -> dict[str, Any]:
    """The error body without server paths: each becomes its last part, so a
    message still names the file without telling a client the layout."""

    def clean(v: str) -> str:
        v = _SQLITE.sub(r"\1", v)
        return _PATH.sub(lambda m: m.group(0).rstrip("/").rsplit("/", 1)[-1], v)

    return {k: clean(v) if isinstance(v, str) else v for k, v in body.items()}


def install(app: FastAPI) -> None:
    @app.exception_handler(SoundingError)
    async def _ours(_req: Request, exc: SoundingError) -> JSONResponse:
        headers = {"WWW-Authenticate": "Bearer"} if isinstance(exc, AuthError) else None
        return JSONResponse({"error": scrub(exc.to_dict())}, status_code=status_for(exc), headers=headers)

    @app.exception_handler(RequestValidationError)
    async def _validation(_req: Request, exc: RequestValidationError) -> JSONResponse:
        problems = []
        for e in exc.errors():
            loc = ".".join(str(p) for p in e.get("loc", ()) if p != "body")
            problems.append({"where": loc, "message": _message(dict(e))})
        first = problems[0] if problems else {"where": None, "message": "invalid request"}
        body = {
            "code": "invalid_request",
            "message": f"{first['where']}: {first['message']}" if first["where"] else first["message"],
            "problems": problems,
        }
        return JSONResponse({"error": body}, status_code=422)

    @app.exception_handler(StarletteHTTPException)
    async def _http(_req: Request, exc: StarletteHTTPException) -> JSONResponse:
        if exc.status_code == 400:
            # FastAPI's answer to a body it cannot decode (e.g. bytes that are
            # not UTF-8): bad input like any other, so 422 as for an InputError.
            return JSONResponse(
                {"error": {"code": "invalid_request", "message": f"body: {exc.detail}"}},
                status_code=422,
            )
        code = {404: "not_found", 405: "method_not_allowed", 401: "unauthorized"}.get(
            exc.status_code, "http_error"
        )
        return JSONResponse(
            {"error": {"code": code, "message": str(exc.detail)}},
            status_code=exc.status_code,
            headers=getattr(exc, "headers", None),
        )

    @app.exception_handler(Exception)
    async def _bug(_req: Request, exc: Exception) -> JSONResponse:
        log.exception("unexpected error")
        return JSONResponse(
            {"error": {"code": "internal", "message": "an unexpected error happened; see the server log"}},
            status_code=500,
        )
