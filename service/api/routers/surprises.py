"""Settled posts that did far better or worse than their out-of-sample forecast."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Query
from fastapi.responses import Response

from models.metrics import DEFAULT_METRIC
from service.analysis.surprises import DEFAULT_TOP, SurprisesAnswer, render, surprises
from service.api.deps import WorkspaceDep
from service.api.params import metric_query
from service.api.responses import ERRORS

router = APIRouter(prefix="/v1", tags=["surprises"])

MEDIA_TYPES = {"png": "image/png", "svg": "image/svg+xml"}
_IMAGE = {"schema": {"type": "string", "format": "binary"}}


@router.get(
    "/surprises",
    response_model=SurprisesAnswer,
    responses={
        200: {
            "description": "The answer as JSON, or with format png or svg its figure",
            "content": dict.fromkeys(MEDIA_TYPES.values(), _IMAGE),
        },
        **ERRORS(404, 409, 422, 503),
    },
    summary="Posts that did far better or worse than the forecast made for them at their time",
    description="Every settled post forecast out of sample in time order (rolling origin, as "
    "the backtest does); those furthest outside their interval, with their precedents and "
    "what moved the forecast. This team's own history: associations, not causes.",
)
def get_surprises(
    ws: WorkspaceDep,
    metric: Annotated[str, metric_query()] = DEFAULT_METRIC.value,
    top: Annotated[int, Query(ge=1, le=50, description="Posts each way")] = DEFAULT_TOP,
    format: Annotated[Literal["json", "png", "svg"], Query(description="json, png or svg")] = "json",
) -> Any:
    answer = surprises(ws, metric=metric, top=top)
    if format in MEDIA_TYPES:
        return Response(content=render(answer, format), media_type=MEDIA_TYPES[format])
    return answer
