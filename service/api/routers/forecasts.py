from __future__ import annotations

from fastapi import APIRouter, Request, Response

from models.errors import AuthError, InputError, LimitExceeded, NotFound, NotReady
from service.api.deps import WorkspaceDep
from service.api.responses import ERRORS, json_answer
from service.api.schemas import DraftIn, Forecast, ForecastBatchRequest, ForecastRequest, Forecasts
from service.api.tokens import may_record
from service.checking import check_drafts
from service.forecast.draft import Draft, make_draft
from service.workspace import Workspace

router = APIRouter(prefix="/v1", tags=["forecasts"])


def to_draft(ws: Workspace, d: DraftIn, where: str) -> Draft:
    return make_draft(
        ws,  # the workspace's account facts are cached behind the store's stamp
        text=d.text,
        account=d.account,
        planned_at=d.planned_at,
        draft_id=d.draft_id,
        has_media=d.has_media,
        where=where,
    )


@router.post(
    "/forecasts",
    response_model=Forecast | Forecasts,
    responses=ERRORS(AuthError, NotFound, NotReady, LimitExceeded, InputError),
    summary="Forecast one draft, or a list of drafts",
    description="Send one draft's fields, or {'drafts': [...]} for several. The answer is an "
    "interval with its stated and backtested coverage: an estimate from this team's history, "
    "not a certainty.",
)
def forecasts(body: ForecastRequest | ForecastBatchRequest, ws: WorkspaceDep, request: Request) -> Response:
    record = body.record and may_record(
        ws.settings,
        getattr(request.app.state, "bound_host", None),
        request.headers.get("authorization"),
        asked="record" in body.model_fields_set,
    )
    with ws.store.pinned():  # the store's counters read once for the whole answer
        return json_answer(_forecasts(body, ws, record))


def _forecasts(
    body: ForecastRequest | ForecastBatchRequest, ws: Workspace, record: bool
) -> Forecast | Forecasts:
    if isinstance(body, ForecastBatchRequest):
        ws.forecaster.limits.check_batch(len(body.drafts))
        drafts = [to_draft(ws, d, f"drafts.{i}.planned_at") for i, d in enumerate(body.drafts)]
    else:
        drafts = [to_draft(ws, body, "planned_at")]
    found = check_drafts(
        ws, drafts, metric=body.metric, coverage=body.coverage, record=record, source="api", match=body.match
    )
    return Forecasts(forecasts=found) if isinstance(body, ForecastBatchRequest) else found[0]
