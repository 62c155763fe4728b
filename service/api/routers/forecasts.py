from __future__ import annotations

from fastapi import APIRouter

from ...forecasting import Draft
from ...timeparse import parse_time
from ..deps import WorkspaceDep
from ..responses import ERRORS
from ..schemas import DraftIn, ForecastBatchRequest, ForecastList, ForecastOut, ForecastRequest

router = APIRouter(prefix="/v1", tags=["forecasts"])


def to_draft(ws, d: DraftIn, where: str) -> Draft:  # noqa: ANN001 - workspace
    tz = ws.account(d.account).timezone  # cached behind the store's stamp
    planned = parse_time(d.planned_at, tz=tz, where=where) if d.planned_at else None
    return Draft(text=d.text, account=d.account, planned_at=planned, draft_id=d.draft_id)


@router.post(
    "/forecasts",
    response_model=ForecastOut | ForecastList,
    responses=ERRORS(404, 409, 413, 422),
    summary="Forecast one draft, or a list of drafts",
    description="Send one draft's fields, or {'drafts': [...]} for several. The answer is an "
    "interval with its stated and backtested coverage: an estimate from this team's history, "
    "not a certainty.",
)
def forecasts(
    body: ForecastRequest | ForecastBatchRequest, ws: WorkspaceDep
) -> ForecastOut | ForecastList:
    if isinstance(body, ForecastBatchRequest):
        ws.check_batch(len(body.drafts))
        drafts = [to_draft(ws, d, f"drafts.{i}.planned_at") for i, d in enumerate(body.drafts)]
        found = ws.forecaster.forecast(drafts, metric=body.metric, coverage=body.coverage)
        return ForecastList(forecasts=[ForecastOut(**f.to_dict()) for f in found])
    found = ws.forecaster.forecast([to_draft(ws, body, "planned_at")], metric=body.metric,
                                   coverage=body.coverage)
    return ForecastOut(**found[0].to_dict())
