"""The track record: how the forecasts given turned out."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Query
from fastapi.responses import Response

from models.metrics import DEFAULT_METRIC
from models.track_plots import track_record_figure
from service.api.deps import WorkspaceDep
from service.api.params import Since, metric_query, since_instant, since_query
from service.api.responses import ERRORS
from service.api.schemas import TrackRecord
from service.track.report import report

router = APIRouter(prefix="/v1", tags=["track record"])

MEDIA_TYPES = {"png": "image/png", "svg": "image/svg+xml"}
_IMAGE = {"schema": {"type": "string", "format": "binary"}}


@router.get(
    "/track-record",
    response_model=TrackRecord,
    responses={
        200: {
            "description": "The report as JSON, or with format png or svg its figure",
            "content": dict.fromkeys(MEDIA_TYPES.values(), _IMAGE),
        },
        **ERRORS(404, 422, 503),
    },
    summary="How the forecasts given turned out, per month and overall",
    description="Forecasts given, matched to published posts and settled; live coverage "
    "against the stated coverage with a Wilson 95% interval; MAE(log) of sounding and of the "
    "simple forecasters on the same posts; the worst misses with their precedents.",
)
def track_record(
    ws: WorkspaceDep,
    since: Annotated[Since | None, since_query("Forecasts given from this date or time")] = None,
    account: Annotated[str | None, Query(description="Only this account")] = None,
    metric: Annotated[str, metric_query("The forecast metric")] = DEFAULT_METRIC.value,
    format: Annotated[Literal["json", "png", "svg"], Query(description="json, png or svg")] = "json",
) -> Any:
    rep = report(ws, since=since_instant(since), account=account, metric=metric)
    if format in MEDIA_TYPES:
        figure = track_record_figure(rep.model_dump(mode="json"), fmt=format)
        return Response(content=figure, media_type=MEDIA_TYPES[format])
    return rep
