from __future__ import annotations

from typing import Any

from fastapi import APIRouter
from fastapi.responses import Response

from models.errors import InputError, NotFound, NotReady, StoreError
from service.api.deps import WorkspaceDep
from service.api.responses import ERRORS
from service.api.schemas import SegmentResult, SegmentsRequest
from service.segmenting import SegmentRequest, render, segment

router = APIRouter(prefix="/v1", tags=["segments"])

MEDIA_TYPES = {"png": "image/png", "svg": "image/svg+xml"}

_IMAGE = {"schema": {"type": "string", "format": "binary"}}

RESPONSES: dict[int | str, dict[str, Any]] = {
    200: {
        "description": "The statistics as JSON, or with format png or svg the figure of one "
        "split (per-segment distributions and medians with their intervals)",
        "content": {MEDIA_TYPES["png"]: _IMAGE, MEDIA_TYPES["svg"]: _IMAGE},
    },
    **ERRORS(NotFound, NotReady, InputError, StoreError),
}


@router.post(
    "/segments",
    response_model=SegmentResult,
    responses=RESPONSES,
    summary="How a metric differs between topics, hours, forms or accounts",
    description="Topics are short phrases matched to posts by embedding similarity, so no "
    "labels are needed. Each segment gets its count, median with a bootstrap interval, "
    "Mann-Whitney test against the other posts (rank-biserial r, Holm-adjusted p) and a "
    "one-line reading; Kruskal-Wallis tests the split as a whole. Differences are "
    "associations in this team's history, not causes.",
)
def segments(body: SegmentsRequest, ws: WorkspaceDep) -> SegmentResult | Response:
    req = SegmentRequest(**body.model_dump(exclude={"format", "plot"}))
    result = segment(ws, req)
    if body.plot is not None:
        result.split(body.plot)  # a wrong name is an error in JSON mode too
    if body.format in MEDIA_TYPES:
        data = render(result, by=body.plot, fmt=body.format)
        return Response(content=data, media_type=MEDIA_TYPES[body.format])
    return result
