"""A metric per month or week, for the whole history and for topics, with its trend."""

from __future__ import annotations

from typing import Any, Literal

from fastapi import APIRouter
from fastapi.responses import Response
from pydantic import BaseModel, Field

from models.metrics import DEFAULT_METRIC
from models.segments import DEFAULT_MIN_N
from models.trends import DEFAULT_LAST
from service.analysis.trends import MAX_LAST, TrendAnswer, TrendRequest, render, trends
from service.api.deps import WorkspaceDep
from service.api.params import MetricName, Since, since_instant
from service.api.responses import ERRORS
from service.api.schemas import TopicPhrase
from service.segments.request import DEFAULT_THRESHOLD, MAX_TOPICS

router = APIRouter(prefix="/v1", tags=["trends"])

MEDIA_TYPES = {"png": "image/png", "svg": "image/svg+xml"}
_IMAGE = {"schema": {"type": "string", "format": "binary"}}


class TrendsBody(BaseModel):
    by: Literal["month", "week"] = "month"
    topics: list[TopicPhrase] = Field(
        default_factory=list, max_length=MAX_TOPICS, description="Topic phrases"
    )
    metric: MetricName = DEFAULT_METRIC.value
    account: str | None = None
    since: Since | None = Field(default=None, description="Only posts from this date or time")
    last: int = Field(default=DEFAULT_LAST, ge=3, le=MAX_LAST, description="Periods the trend is fitted over")
    min_n: int = Field(default=DEFAULT_MIN_N, ge=1, description="Flag periods with fewer posts")
    threshold: float = Field(default=DEFAULT_THRESHOLD, ge=-1, le=1)
    format: Literal["json", "png", "svg"] = "json"


@router.post(
    "/trends",
    response_model=TrendAnswer,
    responses={
        200: {
            "description": "The answer as JSON, or with format png or svg its figure",
            "content": dict.fromkeys(MEDIA_TYPES.values(), _IMAGE),
        },
        **ERRORS(404, 409, 422, 503),
    },
    summary="A metric per month or week, for the whole history and for topics, with its trend",
    description="Posts per period and their share, the median with a bootstrap interval, and "
    "the Theil–Sen slope of the log median over the last periods with its confidence interval. "
    "Periods with few posts are flagged. This team's own history: associations, not causes.",
)
def post_trends(body: TrendsBody, ws: WorkspaceDep) -> Any:
    req = TrendRequest(
        by=body.by,
        topics=body.topics,
        metric=body.metric,
        account=body.account or None,
        since=since_instant(body.since),
        last=body.last,
        min_n=body.min_n,
        threshold=body.threshold,
    )
    answer = trends(ws, req)
    if body.format in MEDIA_TYPES:
        return Response(content=render(answer, body.format), media_type=MEDIA_TYPES[body.format])
    return answer
