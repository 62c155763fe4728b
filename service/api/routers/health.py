from __future__ import annotations

from fastapi import APIRouter

from models.errors import StoreError

from ...health import health as health_of
from ..deps import WorkspaceDep
from ..responses import ERRORS
from ..schemas import AccountOut, Health

router = APIRouter(prefix="/v1", tags=["health"])


@router.get(
    "/health", response_model=Health, responses=ERRORS(StoreError), summary="Counts, model and index state"
)
def health(ws: WorkspaceDep) -> Health:
    return health_of(ws)


@router.get(
    "/accounts",
    response_model=list[AccountOut],
    responses=ERRORS(StoreError),
    summary="Accounts in the store",
)
def accounts(ws: WorkspaceDep) -> list[AccountOut]:
    return [
        AccountOut(handle=a.handle, display_name=a.display_name, timezone=a.timezone, posts=a.posts)
        for a in ws.store.accounts()
    ]
