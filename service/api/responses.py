"""Declared error answers, so the OpenAPI schema says what each endpoint returns,
and answers written straight from their models.

The statuses and their descriptions come from the error classes themselves
(``models.errors``), the same registry the error handler and the client use.
"""

from __future__ import annotations

from typing import Any

from fastapi import Response
from pydantic import BaseModel

from models.errors import SoundingError, error_class
from service.api.schemas import ErrorBody


def ERRORS(*errors: type[SoundingError] | int) -> dict[int | str, dict[str, Any]]:  # noqa: N802 - reads as a constant
    """OpenAPI ``responses`` for the error classes (or bare statuses) an endpoint can raise."""
    out: dict[int | str, dict[str, Any]] = {}
    for e in errors:
        cls = e if isinstance(e, type) else error_class(None, e)
        out[cls.status] = {"model": ErrorBody, "description": cls.description}
    return out


def json_answer(answer: BaseModel) -> Response:
    """``answer`` as its JSON, written once by its own pydantic model.

    FastAPI would otherwise dump a returned model, validate the dump against
    the route's ``response_model`` (a union for forecasts) and serialise it
    again: about a millisecond per forecast answer. The ``response_model``
    still declares the shape in the OpenAPI schema.
    """
    return Response(content=answer.model_dump_json(), media_type="application/json")
