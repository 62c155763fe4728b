from __future__ import annotations

from fastapi import APIRouter

from models.errors import InputError, LimitExceeded, NotFound, NotReady
from service.api.deps import WorkspaceDep
from service.api.responses import ERRORS
from service.api.schemas import VariantsReport, VariantsRequest
from service.forecast.draft import planned_time
from service.review.wordings import compare_variants

router = APIRouter(prefix="/v1", tags=["variants"])


DESCRIPTION = (
    "Each version is forecast for the same account and time, ranked by median, with its own "
    "precedents (those the others do not have). Versions whose intervals overlap heavily are "
    "reported as not told apart. Estimates from this team's history, not certainties."
)


@router.post(
    "/comparisons",
    response_model=VariantsReport,
    responses=ERRORS(NotFound, NotReady, LimitExceeded, InputError),
    summary="Compare several versions of one draft side by side",
    description=DESCRIPTION,
)
# The earlier path, kept for one release so scripts written against it keep working.
@router.post(
    "/variants",
    response_model=VariantsReport,
    responses=ERRORS(NotFound, NotReady, LimitExceeded, InputError),
    summary="Compare several versions of one draft (earlier path of /v1/comparisons)",
    description=DESCRIPTION + " Deprecated: use /v1/comparisons.",
    deprecated=True,
)
def variants(body: VariantsRequest, ws: WorkspaceDep) -> VariantsReport:
    planned = planned_time(ws, body.account, body.planned_at, where="planned_at")
    return compare_variants(
        ws.forecaster,
        body.texts,
        account=body.account,
        planned_at=planned,
        metric=body.metric,
        coverage=body.coverage,
        has_media=body.has_media,
        match=body.match,
    )
