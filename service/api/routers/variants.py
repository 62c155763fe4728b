from __future__ import annotations

from fastapi import APIRouter

from models.errors import InputError, LimitExceeded, NotFound, NotReady
from service.api.deps import WorkspaceDep
from service.api.responses import ERRORS
from service.api.schemas import VariantsReport, VariantsRequest
from service.timeparse import parse_time
from service.wordings import compare_variants

router = APIRouter(prefix="/v1", tags=["variants"])


@router.post(
    "/variants",
    response_model=VariantsReport,
    responses=ERRORS(NotFound, NotReady, LimitExceeded, InputError),
    summary="Forecast several phrasings of one draft side by side",
    description="Each variant is forecast for the same account and time, ranked by median, with "
    "the precedents it has that the others do not. Variants whose intervals overlap heavily are "
    "reported as not told apart. Estimates from this team's history, not certainties.",
)
def variants(body: VariantsRequest, ws: WorkspaceDep) -> VariantsReport:
    tz = ws.store.account(body.account).timezone
    planned = parse_time(body.planned_at, tz=tz, where="planned_at") if body.planned_at else None
    return compare_variants(
        ws.forecaster,
        body.texts,
        account=body.account,
        planned_at=planned,
        metric=body.metric,
        coverage=body.coverage,
        has_media=body.has_media,
    )
