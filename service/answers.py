"""Pieces shared by several answers, each defined once.

The answers themselves are pydantic models in the module that produces them
(``service.history.precedents.Precedent``, ``service.forecast.forecaster.Forecast``, ...):
the CLI's ``--json`` prints ``model_dump(mode="json")`` of them and the API
declares them as its response models, so an answer's fields, renames and
rounding are written in one place. This module holds what more than one of
them needs: how a time and a rounded number are written, a post's metric
values, the coverage a forecast may be asked at, and the track record's
pieces of a forecast (its calibration and live coverage).
"""

from __future__ import annotations

import math
from datetime import datetime
from typing import Annotated, Any

from pydantic import BaseModel, BeforeValidator, Field, PlainSerializer, WithJsonSchema

from models.metrics import MAX_COVERAGE, METRIC_COLUMNS, MIN_COVERAGE


def _iso(dt: datetime) -> str:
    return dt.isoformat()


#: A time as RFC 3339 text with its offset written out (``+00:00`` for UTC,
#: as ``datetime.isoformat`` writes it), the same in the CLI and the API.
Instant = Annotated[
    datetime,
    PlainSerializer(_iso, return_type=str, when_used="json"),
    WithJsonSchema({"type": "string", "format": "date-time"}),
]


def _round2(v: float) -> float:
    return round(v, 2)


def _round3(v: float) -> float:
    return round(v, 3)


def _round4(v: float) -> float:
    return round(v, 4)


#: Numbers kept exact inside and written rounded (similarities, weights, shares).
Round2 = Annotated[float, PlainSerializer(_round2, return_type=float)]
Round3 = Annotated[float, PlainSerializer(_round3, return_type=float)]
Round4 = Annotated[float, PlainSerializer(_round4, return_type=float)]


def value_text(v: float, metric: str) -> str:
    """A metric value as sentences and tables write it: a rate as a percentage,
    a count whole, rounded half up as the page rounds (a median of an even
    number of posts may end in .5)."""
    return f"{v:.2%}" if metric == "engagement_rate" else f"{math.floor(v + 0.5):,}"


def _a_number(value: Any) -> Any:
    # NaN compares false with both bounds; say what is wanted rather than "<= 0.95".
    if isinstance(value, float) and math.isnan(value):
        raise ValueError(f"coverage must be a number between {MIN_COVERAGE} and {MAX_COVERAGE}, got NaN")
    return value


#: A nominal coverage that can be asked for (models.metrics states the range).
Coverage = Annotated[float, Field(ge=MIN_COVERAGE, le=MAX_COVERAGE), BeforeValidator(_a_number)]

_COUNT_OR_NULL: dict[str, Any] = {"anyOf": [{"type": "integer"}, {"type": "null"}]}
#: A post's metric values by name (models.metrics.METRIC_COLUMNS), null where not measured.
MetricValues = Annotated[
    dict[str, int | None],
    WithJsonSchema(
        {
            "type": "object",
            "properties": dict.fromkeys(METRIC_COLUMNS, _COUNT_OR_NULL),
            "additionalProperties": _COUNT_OR_NULL,
        }
    ),
]


class Calibration(BaseModel):
    """Which calibration shaped a forecast's interval (service.track.record)."""

    method: str = Field(
        description="cqr: as trained; cqr+aci: adapted to scored outcomes "
        "(adaptive conformal inference, Gibbs & Candes 2021)"
    )
    level: str
    alpha: float
    alpha_t: float = Field(description="Working miscoverage level after adaptation")
    outcomes: int = Field(default=0, description="Scored forecasts the adaptation has seen")
    pseudo_outcomes: int = Field(default=0, description="Settled posts forecast as they would have been")
    capped: bool = False
    gamma: float | None = None
    widening_held: bool = Field(
        default=False,
        description="The level asked for a wider interval, held back until enough forecasts are scored",
    )
    reason: str | None = Field(default=None, description="Why the working level moved, in words")


class LiveCoverage(BaseModel):
    """How often scored forecasts of one metric and level held so far (service.track.record)."""

    scored: int = Field(description="Forecasts of this metric and level scored so far")
    held: int
    coverage: float | None = Field(
        description="Share of scored forecasts whose outcome fell inside the interval"
    )
    ci: list[float] | None = Field(description="Wilson 95% interval of that share")
