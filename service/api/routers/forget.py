"""Forgetting: delete an account or a post from the store and the index together."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Query

from models.errors import AuthError, InputError, NotFound, NotReady, StoreError
from service.api.deps import WorkspaceDep, WriteAccess
from service.api.responses import ERRORS
from service.api.schemas import ForgetOut

router = APIRouter(prefix="/v1", tags=["forget"])


@router.delete(
    "/accounts/{handle:path}",  # a handle may hold "/"
    response_model=ForgetOut,
    responses=ERRORS(AuthError, NotFound, NotReady, InputError, StoreError),
    summary="Forget an account: its posts, metric snapshots and vectors",
)
def forget_account(handle: str, ws: WorkspaceDep, _auth: WriteAccess) -> ForgetOut:
    deleted = ws.forget(account=handle)
    return ForgetOut(deleted=deleted, posts=ws.store.counts()["posts"])


@router.delete(
    "/posts/{post_id:path}",  # a post id may hold "/"
    response_model=ForgetOut,
    responses=ERRORS(AuthError, NotFound, NotReady, InputError, StoreError),
    summary="Forget one post: its metric snapshots and, when unused, its vector",
)
def forget_post(
    post_id: str,
    ws: WorkspaceDep,
    _auth: WriteAccess,
    account: Annotated[
        str | None, Query(description="The post's account; needed when the id repeats")
    ] = None,
) -> ForgetOut:
    deleted = ws.forget(post_id=post_id, account=account)
    return ForgetOut(deleted=deleted, posts=ws.store.counts()["posts"])
