from __future__ import annotations

from fastapi import APIRouter

from models.errors import InputError, LimitExceeded, NotFound, StoreError

from ..deps import WorkspaceDep
from ..responses import ERRORS
from ..schemas import PrecedentOut, PrecedentsRequest, PrecedentsResponse

router = APIRouter(prefix="/v1", tags=["precedents"])


@router.post(
    "/precedents",
    response_model=PrecedentsResponse,
    responses=ERRORS(NotFound, LimitExceeded, InputError, StoreError),
    summary="The most similar past posts of a draft",
)
def precedents(body: PrecedentsRequest, ws: WorkspaceDep) -> PrecedentsResponse:
    found = ws.precedents(body.text, k=body.k, account=body.account, since=body.since, until=body.until)
    return PrecedentsResponse(
        precedents=[PrecedentOut(**{**p.to_dict(), "posted_at": p.posted_at}) for p in found]
    )
