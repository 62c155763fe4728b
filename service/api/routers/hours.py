from __future__ import annotations

from fastapi import APIRouter

from models.errors import InputError, LimitExceeded, NotFound, NotReady
from service.api.deps import WorkspaceDep
from service.api.responses import ERRORS
from service.api.schemas import HoursReport, HoursRequest
from service.review.hours import best_hours

router = APIRouter(prefix="/v1", tags=["hours"])


@router.post(
    "/hours",
    response_model=HoursReport,
    responses=ERRORS(NotFound, NotReady, LimitExceeded, InputError),
    summary="Forecast one draft at every hour of a local day, or of seven days",
    description="Slots step hour by hour in UTC from local midnight to the next local midnight "
    "in the account's IANA zone (23 or 25 slots on daylight-saving days). The answer ranks the "
    "slots by median and says when their intervals cannot tell them apart. Estimates from this "
    "team's history, not certainties.",
)
def hours(body: HoursRequest, ws: WorkspaceDep) -> HoursReport:
    return best_hours(
        ws.forecaster,
        body.text,
        account=body.account,
        day=body.day,
        week=body.week,
        metric=body.metric,
        coverage=body.coverage,
        top=body.top,
        has_media=body.has_media,
        min_posts=body.min_posts,
        match=body.match,
    )
