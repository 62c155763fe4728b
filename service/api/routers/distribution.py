"""How one metric is spread over the settled posts, and which law its top follows."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Query
from fastapi.responses import Response

from models.metrics import DEFAULT_METRIC
from service.analysis.distribution import DistributionAnswer, distribution, render
from service.api.deps import WorkspaceDep
from service.api.params import Since, metric_query, since_instant, since_query
from service.api.responses import ERRORS

router = APIRouter(prefix="/v1", tags=["distribution"])

MEDIA_TYPES = {"png": "image/png", "svg": "image/svg+xml"}
_IMAGE = {"schema": {"type": "string", "format": "binary"}}


@router.get(
    "/distribution",
    response_model=DistributionAnswer,
    responses={
        200: {
            "description": "The answer as JSON, or with format png or svg its histogram",
            "content": dict.fromkeys(MEDIA_TYPES.values(), _IMAGE),
        },
        **ERRORS(404, 409, 422, 503),
    },
    summary="How a metric is spread over the posts, and which law its top follows",
    description="Median, central half, 90th and 99th percentiles and the fraction of posts that "
    "make half the total; a histogram on a log axis; log-normal, power-law and exponential "
    "fits to the tail compared by likelihood ratio with Vuong's p-value (Clauset, Shalizi & "
    "Newman 2009). This team's own history: associations, not causes.",
)
def get_distribution(
    ws: WorkspaceDep,
    metric: Annotated[str, metric_query()] = DEFAULT_METRIC.value,
    account: Annotated[str | None, Query(description="Only this account")] = None,
    since: Annotated[Since | None, since_query()] = None,
    format: Annotated[Literal["json", "png", "svg"], Query(description="json, png or svg")] = "json",
) -> Any:
    answer = distribution(ws, metric=metric, account=account or None, since=since_instant(since))
    if format in MEDIA_TYPES:
        return Response(content=render(answer, format), media_type=MEDIA_TYPES[format])
    return answer
