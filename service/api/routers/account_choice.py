from __future__ import annotations

from fastapi import APIRouter

from models.errors import InputError, LimitExceeded, NotFound, NotReady
from service.account_choice import choose_account
from service.api.deps import WorkspaceDep
from service.api.responses import ERRORS
from service.api.schemas import AccountChoice, AccountChoiceRequest

router = APIRouter(prefix="/v1", tags=["account choice"])


@router.post(
    "/account-choices",
    response_model=AccountChoice,
    responses=ERRORS(NotFound, NotReady, LimitExceeded, InputError),
    summary="Which account should post a draft: its forecast for each, ranked",
    description="The draft is forecast for each account at the planned time, read in each "
    "account's own zone, ranked by median; accounts whose intervals overlap heavily are tied. "
    "Each row says which of the draft's precedents are that account's own and how they did "
    "against its usual level. Not recorded in the track record. Estimates from this team's "
    "history, not certainties.",
)
def account_choices(body: AccountChoiceRequest, ws: WorkspaceDep) -> AccountChoice:
    with ws.store.pinned():  # the store's counters read once for the whole answer
        return choose_account(
            ws,
            body.text,
            accounts=body.accounts,
            planned_at=body.planned_at,
            has_media=body.has_media,
            metric=body.metric,
            coverage=body.coverage,
            match=body.match,
        )
