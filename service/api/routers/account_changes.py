"""Changing an account: its name, zone, reference or team, and follower counts."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Path

from models.errors import AuthError, InputError, NotFound, NotReady, ReadOnly, StoreError
from service.api.deps import WorkspaceDep, WriteAccess
from service.api.responses import ERRORS
from service.api.schemas import AccountChange, AccountInfo
from service.storage.handles import HANDLE_PATTERN, HANDLE_RULE, MAX_HANDLE

router = APIRouter(prefix="/v1", tags=["accounts"])


@router.put(
    "/accounts/{handle:path}",  # a handle may hold "/"
    response_model=AccountInfo,
    responses=ERRORS(AuthError, NotFound, InputError, NotReady, ReadOnly, StoreError),
    summary="Create or change an account: name, zone, reference or team, a follower count",
)
def change_account(
    handle: Annotated[
        str, Path(pattern=HANDLE_PATTERN, max_length=MAX_HANDLE, description=f"The handle: {HANDLE_RULE}")
    ],
    change: AccountChange,
    ws: WorkspaceDep,
    _auth: WriteAccess,
) -> AccountInfo:
    return ws.change_account(
        handle,
        display_name=change.display_name,
        timezone=change.timezone,
        reference=change.reference,
        followers=change.followers,
        since=change.since,
    )
