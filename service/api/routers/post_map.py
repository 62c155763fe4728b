"""The map of the posts: a 2-D projection of their text vectors."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Query
from fastapi.responses import Response

from models.metrics import DEFAULT_METRIC
from service.analysis.topics import MapAnswer, render_map, topic_map
from service.api.deps import WorkspaceDep
from service.api.params import Since, metric_query, since_instant, since_query
from service.api.responses import ERRORS

router = APIRouter(prefix="/v1", tags=["map"])

MEDIA_TYPES = {"png": "image/png", "svg": "image/svg+xml"}
_IMAGE = {"schema": {"type": "string", "format": "binary"}}


@router.get(
    "/map",
    response_model=MapAnswer,
    responses={
        200: {
            "description": "Every post's place as JSON, or with format png or svg the picture",
            "content": dict.fromkeys(MEDIA_TYPES.values(), _IMAGE),
        },
        **ERRORS(404, 409, 422, 503),
    },
    summary="Where the posts lie in meaning: a PCA projection coloured by the metric",
    description="The first two principal components of the text vectors; distances are "
    "approximate. The found topics' names sit at their centres.",
)
def get_map(
    ws: WorkspaceDep,
    metric: Annotated[str, metric_query("The metric that colours the posts")] = DEFAULT_METRIC.value,
    account: Annotated[str | None, Query(description="Only this account")] = None,
    since: Annotated[Since | None, since_query()] = None,
    format: Annotated[Literal["json", "png", "svg"], Query(description="json, png or svg")] = "json",
) -> Any:
    answer = topic_map(ws, metric=metric, account=account or None, since=since_instant(since))
    if format in MEDIA_TYPES:
        return Response(content=render_map(answer, format), media_type=MEDIA_TYPES[format])
    return answer
