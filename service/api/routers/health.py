from __future__ import annotations

from fastapi import APIRouter

from models.errors import StoreError

from ...health import health as health_of
from ..deps import WorkspaceDep
from ..responses import ERRORS
from ..schemas import AccountInfo, Health

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
