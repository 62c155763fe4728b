"""A draft as the forecaster reads it, made from the fields people send.

Every way in (the API, the command line, plan files and the page) turns a
draft's fields into a :class:`Draft` here: the planned time is read in the
account's own zone when it carries no offset.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import Protocol

from service.clock import parse_time
from service.ingest.timestamps import TimeReader
from service.storage.accounts import AccountInfo


class Accounts(Protocol):
    """Where an account's facts come from (a store, or a workspace's cache of them)."""

    def account(self, handle: str) -> AccountInfo: ...


@dataclass(slots=True)
class Draft:
    text: str
    account: str
    planned_at: datetime | None = None  # aware; None means now
    draft_id: str | None = None
    has_media: bool = False  # an image or video attached, as the has_media column of posts


def planned_time(
    accounts: Accounts,
    account: str,
    text: str | None,
    *,
    where: str,
    reader: TimeReader | None = None,
    timezone: str | None = None,
) -> datetime | None:
    """A planned time as sent: ISO 8601 (or the layouts ``reader`` reads), in
    ``timezone`` or else the account's zone when it has no offset; None
    (meaning now) when blank. Unknown accounts raise NotFound."""
    tz = timezone or accounts.account(account).timezone
    if text is None or not text.strip():
        return None
    if reader is not None:
        return reader.read(text, tz=tz, where=where)
    return parse_time(text, tz=tz, where=where)


def make_draft(
    accounts: Accounts,
    *,
    text: str,
    account: str,
    planned_at: str | datetime | None = None,
    draft_id: str | None = None,
    has_media: bool = False,
    where: str = "planned_at",
) -> Draft:
    """A draft from its fields; ``planned_at`` as text is read by :func:`planned_time`."""
    planned: datetime | None = planned_at if isinstance(planned_at, datetime) else None
    if isinstance(planned_at, datetime):
        accounts.account(account)  # unknown accounts fail here, as with a time given as text
    else:
        planned = planned_time(accounts, account, planned_at, where=where)
    return Draft(text=text, account=account, planned_at=planned, draft_id=draft_id, has_media=has_media)
