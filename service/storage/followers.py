"""Accounts' follower counts over time, and the count in force at a post's time.

A count is stored from a time on (``since``) and holds until the account's
next count. A post reads the latest count of its account at or before its
posting time (an as-of join, by account); a post older than its account's
first count has none, and every per-follower metric of it is missing rather
than guessed.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime

import numpy as np
from sqlalchemy import delete, select

from models.errors import InputError
from service.clock import as_utc, to_naive_utc
from service.storage.engine import StoreBase
from service.storage.handles import check_handle, unknown_account
from service.storage.tables import Account, FollowerCount

#: Counts are whole people; past this a value is a typing slip, not an audience.
MAX_FOLLOWERS = 10**10


def check_followers(value: int, *, where: str = "followers") -> int:
    """``value`` if it can be a follower count, else a clear error."""
    if isinstance(value, bool) or not isinstance(value, int) or not 0 <= value <= MAX_FOLLOWERS:
        raise InputError(
            f"a follower count is a whole number from 0 to {MAX_FOLLOWERS:,}; got {value!r}",
            field=where,
            value=str(value),
        )
    return value


def as_of(
    post_accounts: np.ndarray,
    post_times: np.ndarray,
    count_accounts: np.ndarray,
    count_times: np.ndarray,
    counts: np.ndarray,
) -> np.ndarray:
    """The follower count in force at each post's time: its account's latest
    count at or before the time, NaN where the account had none yet.

    Accounts are any hashable keys (handles, row ids), times numbers on
    one scale (seconds). A binary search per account, the rule of pandas'
    ``merge_asof(direction="backward", by=...)``, without sorting the posts.
    """
    out = np.full(len(post_times), np.nan)
    if len(counts) == 0 or len(post_times) == 0:
        return out
    import pandas as pd

    # Posts' accounts as small integers once (a hash pass), so each account's
    # posts are found by comparing integers, not strings, at a million posts.
    codes, uniques = pd.factorize(pd.Series(np.asarray(post_accounts, dtype=object)))
    code_of = {u: i for i, u in enumerate(uniques)}
    post_times = np.asarray(post_times, dtype=np.float64)
    count_accounts = np.asarray(count_accounts, dtype=object)
    for acc in dict.fromkeys(count_accounts.tolist()):
        code = code_of.get(acc)
        if code is None:
            continue  # counts of an account with no post here
        mine = count_accounts == acc
        order = np.argsort(np.asarray(count_times, dtype=np.float64)[mine], kind="stable")
        times = np.asarray(count_times, dtype=np.float64)[mine][order]
        values = np.asarray(counts, dtype=np.float64)[mine][order]
        rows = np.flatnonzero(codes == code)
        at = np.searchsorted(times, post_times[rows], side="right") - 1
        known = at >= 0
        out[rows[known]] = values[at[known]]
    return out


class FollowerRecords(StoreBase):
    """A store's follower counts."""

    def set_followers(self, handle: str, followers: int, *, since: datetime) -> None:
        """Record ``handle``'s follower count from ``since`` on (replacing a
        count given for the same time)."""
        handle = check_handle(handle)
        check_followers(followers)
        at = to_naive_utc(as_utc(since))
        with self.session() as s:
            acc_id = s.scalar(select(Account.id).where(Account.handle == handle))
            if acc_id is None:
                raise unknown_account(handle, s.scalars(select(Account.handle)).all())
            s.execute(
                delete(FollowerCount).where(FollowerCount.account_id == acc_id, FollowerCount.since == at)
            )
            s.add(FollowerCount(account_id=acc_id, since=at, followers=followers))

    def follower_counts(self, handles: Sequence[str] | None = None) -> list[tuple[str, datetime, int]]:
        """(handle, since as aware UTC, count) of the given accounts (all: None), oldest first."""
        q = select(Account.handle, FollowerCount.since, FollowerCount.followers).join(
            Account, Account.id == FollowerCount.account_id
        )
        if handles is not None:
            q = q.where(Account.handle.in_(list(handles)))
        with self.session() as s:
            return [(h, as_utc(t), int(n)) for h, t, n in s.execute(q.order_by(FollowerCount.since))]

    def followers_at(
        self, accounts: Sequence[str] | np.ndarray, seconds: Sequence[float] | np.ndarray
    ) -> np.ndarray:
        """The count in force for each (account, time in seconds since the
        epoch): :func:`as_of` over the stored counts."""
        if not len(accounts):
            return np.zeros(0)
        found = self.follower_counts(sorted(set(accounts)))
        return as_of(
            np.asarray(accounts, dtype=object),
            np.asarray(seconds, dtype=np.float64),
            np.array([h for h, _, _ in found], dtype=object),
            np.array([t.timestamp() for _, t, _ in found]),
            np.array([n for _, _, n in found], dtype=np.float64),
        )
