"""Accounts: their handles, display names and IANA zones."""

from __future__ import annotations

from datetime import datetime

from pydantic import BaseModel, ConfigDict, Field
from sqlalchemy import func, select

from service.clock import now_utc, to_naive_utc, zone
from service.storage.engine import StoreBase
from service.storage.handles import check_handle, unknown_account
from service.storage.tables import Account, Post


class AccountInfo(BaseModel):
    """An account of the store (``GET /v1/accounts``, ``sounding accounts``)."""

    model_config = ConfigDict(frozen=True)

    handle: str
    display_name: str | None
    timezone: str = Field(description="IANA zone its local times are read in")
    posts: int = 0


class AccountRecords(StoreBase):
    """A store's accounts."""

    def set_account(
        self, handle: str, *, display_name: str | None = None, timezone: str | None = None
    ) -> AccountInfo:
        """Create or update an account. A new account starts in UTC."""
        handle = check_handle(handle)
        if timezone is not None:
            zone(timezone)  # refuse unknown names before touching the store
        with self.session() as s:
            acc = s.scalar(select(Account).where(Account.handle == handle))
            if acc is None:
                acc = Account(handle=handle, timezone=timezone or "UTC", created_at=_now())
                s.add(acc)
            if display_name is not None:
                acc.display_name = display_name
            if timezone is not None:
                acc.timezone = timezone
            s.flush()
            n = s.scalar(select(func.count(Post.id)).where(Post.account_id == acc.id)) or 0
            return AccountInfo(
                handle=acc.handle, display_name=acc.display_name, timezone=acc.timezone, posts=int(n)
            )

    def account(self, handle: str) -> AccountInfo:
        with self.session() as s:
            acc = s.scalar(select(Account).where(Account.handle == handle))
            if acc is None:
                raise unknown_account(handle, s.scalars(select(Account.handle)).all())
            n = s.scalar(select(func.count(Post.id)).where(Post.account_id == acc.id)) or 0
            return AccountInfo(
                handle=acc.handle, display_name=acc.display_name, timezone=acc.timezone, posts=int(n)
            )

    def accounts(self) -> list[AccountInfo]:
        with self.session() as s:
            rows = s.execute(
                select(Account, func.count(Post.id))
                .outerjoin(Post, Post.account_id == Account.id)
                .group_by(Account.id)
                .order_by(Account.handle)
            ).all()
            return [
                AccountInfo(handle=a.handle, display_name=a.display_name, timezone=a.timezone, posts=int(n))
                for a, n in rows
            ]


def _now() -> datetime:
    return to_naive_utc(now_utc())
