from __future__ import annotations

from fastapi import APIRouter

from models.errors import StoreError
from service.api.deps import WorkspaceDep
from service.api.responses import ERRORS
from service.api.schemas import AccountInfo, Health
from service.health import health as health_of

router = APIRouter(prefix="/v1", tags=["health"])


@router.get(
    "/health", response_model=Health, responses=ERRORS(StoreError), summary="Counts, model and index state"
)
def health(ws: WorkspaceDep) -> Health:
    return health_of(ws)


@router.get(
    "/accounts",
    response_model=list[AccountInfo],
    responses=ERRORS(StoreError),
    summary="Accounts in the store",
)
def accounts(ws: WorkspaceDep) -> list[AccountInfo]:
    return ws.store.accounts()
