"""The settled posts of one metric: those whose metric is measured and final
(older than the maturity window), optionally of one account and from a time
on. The analyst's answers (distribution, trends, topics) all start here, so
they count the same posts."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import TYPE_CHECKING

import numpy as np
from pydantic import BaseModel, Field

from models.errors import NotReady
from models.metrics import check_target, target_values, without_followers
from service.clock import now_utc, parse_since
from service.datadir import DataDir

#: Fewer settled posts than this, and no analysis is worth reading.
MIN_POSTS = 20

if TYPE_CHECKING:
    import pandas as pd


class LeftOut(BaseModel):
    no_metric: int = Field(description="Posts without the metric")
    still_gathering: int = Field(
        description="Posts whose metrics are not final yet (younger than the maturity window)"
    )
    before_since: int = Field(default=0, description="Posts before the requested start")
    no_followers: int = Field(
        default=0,
        description="Of no_metric: posts without a follower count in force at their time "
        "(a per-follower metric is missing for them, not guessed)",
    )


@dataclass(slots=True)
class Settled:
    frame: pd.DataFrame  # the kept posts, oldest first, index 0..n-1
    values: np.ndarray  # the metric of each kept post
    left_out: LeftOut


def settled_posts(
    ws: DataDir,
    metric: str,
    *,
    account: str | None = None,
    since: datetime | None = None,
    now: datetime | None = None,
    min_posts: int = MIN_POSTS,
) -> Settled:
    import pandas as pd

    check_target(metric)
    frame = ws.store.posts_frame(account=account)
    values = target_values(frame, metric)
    has_metric = np.isfinite(values)
    cutoff = pd.Timestamp((now or now_utc()) - timedelta(hours=float(ws.settings.maturity_hours)))
    mature = (frame["posted_at"] <= cutoff).to_numpy()
    recent = (
        np.ones(len(frame), dtype=bool)
        if since is None
        else (frame["posted_at"] >= pd.Timestamp(since)).to_numpy()
    )
    keep = has_metric & mature & recent
    left = LeftOut(
        no_metric=int((~has_metric).sum()),
        still_gathering=int((has_metric & ~mature).sum()),
        before_since=int((has_metric & mature & ~recent).sum()),
        no_followers=without_followers(frame, metric),
    )
    n = int(keep.sum())
    if n < min_posts:
        where = f" of account {account}" if account else ""
        raise NotReady(
            f"only {n} settled posts{where} have {metric}; this needs at least {min_posts}"
            + _followers_note(left.no_followers),
            field="metric",
            hint="import more history, or start earlier (--since)",
        )
    return Settled(frame.loc[keep].reset_index(drop=True), values[keep], left)


def _followers_note(n: int) -> str:
    return f" ({n} more have no follower count at their time)" if n else ""


__all__ = ["MIN_POSTS", "LeftOut", "Settled", "parse_since", "settled_posts"]
