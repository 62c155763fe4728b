"""Accounts: their handles, display names and IANA zones."""

from __future__ import annotations

from datetime import datetime

from pydantic import BaseModel, ConfigDict, Field
from sqlalchemy import func, select

from service.clock import now_utc, to_naive_utc, zone
from service.storage.followers import FollowerRecords
from service.storage.handles import check_handle, unknown_account
from service.storage.tables import Account, Post


class AccountInfo(BaseModel):
    """An account of the store (``GET /v1/accounts``, ``sounding accounts``)."""

    model_config = ConfigDict(frozen=True)

    handle: str
    display_name: str | None
    timezone: str = Field(description="IANA zone its local times are read in")
    posts: int = 0
    reference: bool = Field(
        default=False,
        description="A reference account (a peer's): its posts are searched, never measured or learnt from",
    )


def _info(acc: Account, posts: int) -> AccountInfo:
    return AccountInfo(
        handle=acc.handle,
        display_name=acc.display_name,
        timezone=acc.timezone,
        posts=int(posts),
        reference=bool(acc.reference),
    )


class AccountRecords(FollowerRecords):
    """A store's accounts."""

    def set_account(
        self,
        handle: str,
        *,
        display_name: str | None = None,
        timezone: str | None = None,
        reference: bool | None = None,
    ) -> AccountInfo:
        """Create or update an account. A new account starts in UTC, as a team account."""
        handle = check_handle(handle)
        if timezone is not None:
            zone(timezone)  # refuse unknown names before touching the store
        with self.session() as s:
            acc = s.scalar(select(Account).where(Account.handle == handle))
            if acc is None:
                acc = Account(
                    handle=handle, timezone=timezone or "UTC", created_at=_now(), reference=bool(reference)
                )
                s.add(acc)
            if reference is not None:
                acc.reference = reference
            if display_name is not None:
                acc.display_name = display_name
            if timezone is not None:
                acc.timezone = timezone
            s.flush()
            n = s.scalar(select(func.count(Post.id)).where(Post.account_id == acc.id)) or 0
            return _info(acc, n)

    def account(self, handle: str) -> AccountInfo:
        with self.session() as s:
            acc = s.scalar(select(Account).where(Account.handle == handle))
            if acc is None:
                raise unknown_account(handle, s.scalars(select(Account.handle)).all())
            n = s.scalar(select(func.count(Post.id)).where(Post.account_id == acc.id)) or 0
            return _info(acc, n)

    def accounts(self) -> list[AccountInfo]:
        with self.session() as s:
            rows = s.execute(
                select(Account, func.count(Post.id))
                .outerjoin(Post, Post.account_id == Account.id)
                .group_by(Account.id)
                .order_by(Account.handle)
            ).all()
            return [_info(a, n) for a, n in rows]

    def reference_handles(self) -> frozenset[str]:
        """The handles of the reference accounts."""
        with self.session() as s:
            return frozenset(s.scalars(select(Account.handle).where(Account.reference.is_(True))))


def _now() -> datetime:
    return to_naive_utc(now_utc())
