"""Query and body parts that several routers share, declared once with the
constraints the server applies (so the OpenAPI document states them)."""

from __future__ import annotations

from datetime import UTC, date, datetime, time
from typing import Annotated, Any

from fastapi import Query
from pydantic import Field

from models.metrics import TARGETS
from service.api.schemas import InRangeDay, InRangeTime

_METRICS = {"enum": list(TARGETS)}

#: A metric named in a request body.
MetricName = Annotated[str, Field(description="One of: " + ", ".join(TARGETS), json_schema_extra=_METRICS)]
#: A start bound: a date (from its midnight, UTC) or an RFC 3339 time (naive read as UTC).
Since = InRangeDay | InRangeTime


def metric_query(description: str = "The metric") -> Any:
    """A ``metric`` query parameter, one of the metrics sounding knows."""
    return Query(description=f"{description}: one of " + ", ".join(TARGETS), json_schema_extra=_METRICS)


def since_query(description: str = "Only posts from this date or time") -> Any:
    return Query(description=f"{description}: a date or an RFC 3339 time")


def since_instant(value: date | datetime | None) -> datetime | None:
    """The instant a ``since`` bound starts at."""
    if value is None:
        return None
    if not isinstance(value, datetime):
        return datetime.combine(value, time(), tzinfo=UTC)
    return value.astimezone(UTC) if value.tzinfo else value.replace(tzinfo=UTC)
