"""Which hours an account's own history speaks for.

A forecast at an hour the account has (almost) never posted at rests on the
other hours and on the other accounts: the model still answers, but the
answer says little about that hour. Such hours are marked, and the best-hour
ranking leaves them out, so an empty night is never called the best time.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime

import numpy as np

from service.history.view import HistoryView

#: Fewer of the account's posts than this at a local hour (or, over a week, on
#: a weekday) and the hour is marked. Five is a judgement call (common
#: practice, no source): enough posts that one odd post does not make the hour.
DEFAULT_MIN_POSTS = 5
#: ... or fewer than this fraction of an even share of the account's posts (a
#: busy account's 7 posts at 03:00 against 100 at noon still say little).
EVEN_SHARE = 0.25

FEW_POSTS = "few or no posts at this hour: the forecast leans on other hours"


def post_counts(view: HistoryView, account: str) -> tuple[np.ndarray, np.ndarray]:
    """The account's posts per local hour (24) and per weekday (7, Monday 0),
    in the account's own zone."""
    code = view.account_codes.get(account)
    if code is None:
        return np.zeros(24, dtype=np.int64), np.zeros(7, dtype=np.int64)
    mine = view.history.account == code
    hours = np.floor(view.local_hours[mine]).astype(np.int64) % 24
    days = view.weekdays[mine].astype(np.int64) % 7
    return np.bincount(hours, minlength=24), np.bincount(days, minlength=7)


def few_posts(
    view: HistoryView,
    account: str,
    local_times: Sequence[datetime],
    *,
    min_posts: int = DEFAULT_MIN_POSTS,
    by_weekday: bool = False,
) -> list[bool]:
    """Per local time: whether the account has few posts at that hour (or,
    with ``by_weekday``, at that hour or on that weekday): fewer than
    ``min_posts``, or than a quarter of an even share of its posts."""
    per_hour, per_day = post_counts(view, account)
    total = int(per_hour.sum())
    hour_floor = max(min_posts, EVEN_SHARE * total / 24)
    day_floor = max(min_posts, EVEN_SHARE * total / 7)
    return [
        bool(per_hour[t.hour] < hour_floor or (by_weekday and per_day[t.weekday()] < day_floor))
        for t in local_times
    ]
