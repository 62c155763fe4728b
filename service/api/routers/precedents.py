from __future__ import annotations

from fastapi import APIRouter

from models.errors import InputError, LimitExceeded, NotFound, StoreError
from service.api.deps import WorkspaceDep
from service.api.responses import ERRORS
from service.api.schemas import Precedents, PrecedentsRequest

router = APIRouter(prefix="/v1", tags=["precedents"])


@router.post(
    "/precedents",
    response_model=Precedents,
    responses=ERRORS(NotFound, LimitExceeded, InputError, StoreError),
    summary="The most similar past posts of a draft",
)
def precedents(body: PrecedentsRequest, ws: WorkspaceDep) -> Precedents:
    found = ws.precedents(body.text, k=body.k, account=body.account, since=body.since, until=body.until)
    return Precedents(precedents=found)
