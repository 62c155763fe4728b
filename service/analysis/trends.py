"""Trends: a metric per month or week, for the whole history and for topics
named by phrases (placed as ``segments`` places them: each post joins its
nearest phrase above the threshold), with the Theil–Sen trend of the median
over the last periods. The statistics live in :mod:`models.trends`."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import TYPE_CHECKING

import numpy as np
from pydantic import BaseModel, Field

from models.analyst_plots import plot_series
from models.errors import InputError
from models.metrics import DEFAULT_METRIC
from models.segment_bins import assign_nearest
from models.segments import DEFAULT_MIN_N, OTHER, check_min_n, check_threshold
from models.trends import (
    DEFAULT_LAST,
    PERIODS,
    PeriodRow,
    Trend,
    period_label,
    period_rows,
    period_starts,
    trend_of,
)
from service.analysis.settled import LeftOut, settled_posts
from service.answers import Instant
from service.datadir import DataDir
from service.segments.request import DEFAULT_THRESHOLD, parse_topics
from service.segments.segmenting import topic_vectors

WHOLE = "all posts"
NOTE = (
    "Trends describe this team's own history: a topic rising alongside a period is an "
    "association, not a cause (what was posted, when and by whom changed together)."
)
MAX_LAST = 120

if TYPE_CHECKING:
    pass


@dataclass(frozen=True, slots=True, kw_only=True)
class TrendRequest:
    by: str = "month"
    topics: Sequence[str] = ()
    metric: str = DEFAULT_METRIC
    account: str | None = None
    since: datetime | None = None
    last: int = DEFAULT_LAST
    min_n: int = DEFAULT_MIN_N
    threshold: float = DEFAULT_THRESHOLD


class Series(BaseModel):
    name: str = Field(description="'all posts', a topic, or 'other'")
    n: int
    rows: list[PeriodRow]
    trend: Trend | None = Field(description="Null with fewer than three periods holding posts")


class TrendAnswer(BaseModel):
    """The answer to a trends request (HTTP, CLI ``--json`` and page alike)."""

    metric: str
    by: str
    account: str | None
    since: Instant | None
    last: int = Field(description="The trend is fitted over at most this many latest periods")
    n_posts: int
    left_out: LeftOut
    periods: list[str]
    series: list[Series]
    warnings: list[str] = Field(default_factory=list)
    note: str = NOTE


def _check(req: TrendRequest) -> None:
    if req.by not in PERIODS:
        raise InputError(f"period must be one of {', '.join(PERIODS)}", field="by", value=req.by)
    if isinstance(req.last, bool) or not isinstance(req.last, int) or not 3 <= req.last <= MAX_LAST:
        raise InputError(f"last must be a whole number from 3 to {MAX_LAST}", field="last", value=req.last)
    check_min_n(req.min_n)
    check_threshold(req.threshold)


def trends(ws: DataDir, req: TrendRequest, *, now: datetime | None = None) -> TrendAnswer:
    import pandas as pd

    _check(req)
    topics = parse_topics(req.topics)
    posts = settled_posts(ws, req.metric, account=req.account, since=req.since, now=now)
    starts = period_starts(posts.frame["posted_at"], req.by)
    # Every period from the first to the last, so an empty one shows as empty.
    first, last = starts.min(), starts.max()
    span = pd.date_range(first, last, freq="MS" if req.by == "month" else "W-MON", tz="UTC")
    pos = {ts: k for k, ts in enumerate(span)}
    index = np.array([pos[ts] for ts in starts], dtype=np.int64)
    labels = [period_label(ts, req.by) for ts in span]
    totals = np.bincount(index, minlength=len(span)).astype(np.float64)
    groups: list[tuple[str, np.ndarray]] = [(WHOLE, np.ones(index.size, dtype=bool))]
    warnings: list[str] = []
    if topics:
        vecs = topic_vectors(ws, topics)
        sims = ws.retrieval.similarities(vecs, posts.frame["pk"].to_numpy(dtype=np.int64))
        best = assign_nearest(sims, threshold=req.threshold)
        groups += [(t.name, best == j) for j, t in enumerate(topics)]
        groups.append((OTHER, best < 0))
    series = []
    for name, mask in groups:
        rows = period_rows(posts.values[mask], index[mask], totals, labels, min_n=req.min_n)
        series.append(
            Series(name=name, n=int(mask.sum()), rows=rows, trend=trend_of(rows, req.by, last=req.last))
        )
        few = sum(r.few_posts and r.n > 0 for r in rows[-req.last :])
        if few:
            warnings.append(
                f"{name}: {few} of the last {min(req.last, len(rows))} {req.by}s have fewer than "
                f"{req.min_n} posts; their medians are rough"
            )
    if len(span) < 3:
        warnings.append(f"only {len(span)} {req.by}s of history: too few for a trend")
    return TrendAnswer(
        metric=req.metric,
        by=req.by,
        account=req.account,
        since=req.since,
        last=req.last,
        n_posts=int(posts.values.size),
        left_out=posts.left_out,
        periods=labels,
        series=series,
        warnings=warnings,
    )


def render(a: TrendAnswer, fmt: str = "png") -> bytes:
    """Each series' median per period with its interval, on a log axis."""
    nan = float("nan")
    data: dict[str, tuple[Sequence[float], Sequence[float], Sequence[float]]] = {
        s.name: (
            [nan if r.median is None else r.median for r in s.rows],
            [nan if r.ci_low is None else r.ci_low for r in s.rows],
            [nan if r.ci_high is None else r.ci_high for r in s.rows],
        )
        for s in a.series
    }
    return plot_series(a.periods, data, metric=a.metric.replace("_", " "), caption=a.note, fmt=fmt)


def csv_table(a: TrendAnswer) -> tuple[list[str], list[list[str]]]:
    """One row per series and period, as the screen shows it."""
    rows = []
    for s in a.series:
        for r in s.rows:
            rows.append(
                [
                    s.name,
                    r.period,
                    str(r.n),
                    f"{100 * r.share:.0f}",
                    "" if r.median is None else f"{r.median:.0f}",
                    "" if r.ci_low is None else f"{r.ci_low:.0f}",
                    "" if r.ci_high is None else f"{r.ci_high:.0f}",
                    "yes" if r.few_posts else "no",
                ]
            )
    headers = [
        "series",
        a.by,
        "posts",
        "share %",
        f"median {a.metric}",
        "interval low",
        "interval high",
        "few posts",
    ]
    return headers, rows


__all__ = [
    "MAX_LAST",
    "NOTE",
    "PERIODS",
    "WHOLE",
    "Series",
    "TrendAnswer",
    "TrendRequest",
    "csv_table",
    "render",
    "trends",
]
