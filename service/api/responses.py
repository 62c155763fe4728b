"""Declared error answers, so the OpenAPI schema says what each endpoint returns."""

from __future__ import annotations

from typing import Any

from .schemas import ErrorBody

_TEXT = {
    401: "Missing or wrong bearer token",
    404: "Unknown account, post or resource",
    409: "Not ready: no model trained yet, or too little history; or busy: another change is running",
    413: "Past a configured limit",
    422: "Invalid input",
    503: "The store is unavailable",
}


def ERRORS(*codes: int) -> dict[int | str, dict[str, Any]]:  # noqa: N802 - reads as a constant
    return {c: {"model": ErrorBody, "description": _TEXT[c]} for c in codes}
