"""The team's accounts side by side: each account's posts and time span, its
share of the team's posts, its median and the trend of its weekly medians
over the last three months (Theil–Sen, :mod:`models.trends`), its best local
hours (the hour split of :mod:`models.segments`), and the topics found in the
history (:mod:`service.analysis.topics`) where its posts do better, against
its own usual level, than the rest of the team's posts on that topic do
against theirs. Associations in the team's own history, not causes."""

from __future__ import annotations

import math
from datetime import UTC, datetime, timedelta
from typing import TYPE_CHECKING

import numpy as np
from pydantic import BaseModel, Field

from models.metrics import DEFAULT_METRIC
from models.segment_bins import bucket_hours, hour_labels
from models.segments import DEFAULT_ALPHA, compare_segments, holm
from models.trends import Trend, period_label, period_rows, period_starts, trend_of
from service.analysis.settled import LeftOut
from service.analysis.topics import clusters
from service.answers import Instant, value_text
from service.clock import now_utc
from service.datadir import DataDir
from service.history.view import local_clock

if TYPE_CHECKING:
    import pandas as pd

#: Weeks of "the last three months" (the current week and the twelve before it), the trend's span.
RECENT_WEEKS = 13
#: Fewer of an account's posts than this in an hour bucket or a topic, and it is not read.
DEFAULT_MIN_POSTS = 10
NOTE = (
    "These figures describe this team's own history: an account doing better on a topic or "
    "at an hour is an association, not a cause (audiences, hours and topics differ together)."
)


class BestHours(BaseModel):
    """The account's local hour bucket with the highest median (enough posts only)."""

    hours: str = Field(description="Local hour bucket, e.g. '12–15'")
    n: int
    median: float
    rest_median: float | None = Field(description="Median of the account's posts at other hours")
    p_holm: float | None = Field(description="Mann–Whitney U against its other hours, Holm-adjusted")
    rank_biserial: float | None
    clear: bool = Field(description="Clearly higher than its other hours (p_holm below 0.05)")


class BetterTopic(BaseModel):
    """A topic where the account's posts ran further above its usual level than the team's did."""

    topic: str
    n: int = Field(description="The account's posts on the topic")
    lift: float = Field(description="Median of its posts on the topic / its median")
    team_lift: float = Field(
        description="Median over the other accounts' posts on the topic, each / its own account's median"
    )
    p_value: float | None = Field(description="Mann–Whitney U of the two sets of ratios")
    p_holm: float | None = Field(description="Holm-adjusted across the topics read for the account")
    rank_biserial: float | None
    clear: bool = Field(description="p_holm below 0.05")


class AccountOverview(BaseModel):
    account: str
    timezone: str
    posts: int = Field(description="Posts in the store")
    settled: int = Field(description="Posts with the metric, settled (what the figures read)")
    first_post: Instant | None
    last_post: Instant | None
    share: float = Field(description="Share of the team's settled posts")
    median: float | None
    recent_posts: int = Field(description="Settled posts in the last three months")
    recent_median: float | None
    trend: Trend | None = Field(
        description="Theil–Sen trend of log weekly medians over the last 13 weeks, weeks from "
        "Monday UTC (null with fewer than three weeks holding posts)"
    )
    best_hours: BestHours | None
    better_topics: list[BetterTopic] = Field(description="Most above the team first")
    lines: list[str] = Field(description="The same, in plain words")


class TeamOverview(BaseModel):
    """The team overview (``sounding accounts --details``, ``GET /v1/team``, the page)."""

    metric: str
    n_posts: int
    left_out: LeftOut
    recent_from: Instant = Field(
        description="Start of the last three months: the Monday (UTC) twelve weeks before this week's"
    )
    min_posts: int
    topics: list[str] = Field(description="The topics found in the history, by their words")
    accounts: list[AccountOverview]
    note: str = NOTE


def team_overview(
    ws: DataDir,
    *,
    metric: str = DEFAULT_METRIC,
    min_posts: int = DEFAULT_MIN_POSTS,
    now: datetime | None = None,
    seed: int = 0,
) -> TeamOverview:
    import pandas as pd

    now = now or now_utc()
    frame, values, _, model, names, left_out = clusters(ws, metric, None, None, now, seed)
    topic = np.asarray([names[c] for c in model.labels_], dtype=object)
    hours, _ = local_clock(frame["posted_at"], frame["timezone"])
    buckets = bucket_hours(hours)
    # The current week (from Monday, UTC) and the twelve before it.
    monday = now.astimezone(UTC).replace(hour=0, minute=0, second=0, microsecond=0)
    recent_from = monday - timedelta(days=monday.weekday(), weeks=RECENT_WEEKS - 1)
    recent = (frame["posted_at"] >= pd.Timestamp(recent_from)).to_numpy()
    weeks = _weeks(frame["posted_at"], recent)
    accounts = frame["account"].to_numpy(object)
    ratio = ratios_to_usual(values, accounts)
    out = []
    for info in ws.store.accounts():
        mine = accounts == info.handle
        n = int(mine.sum())
        times = frame["posted_at"][mine]
        trend = _trend(values, weeks, mine & recent)
        best = _best_hours(values[mine], buckets[mine], min_posts, metric) if n else None
        better = _better_topics(ratio, topic, mine, names, min_posts)
        row = AccountOverview(
            account=info.handle,
            timezone=info.timezone,
            posts=info.posts,
            settled=n,
            first_post=times.min().to_pydatetime() if n else None,
            last_post=times.max().to_pydatetime() if n else None,
            share=n / values.size if values.size else 0.0,
            median=float(np.median(values[mine])) if n else None,
            recent_posts=int((mine & recent).sum()),
            recent_median=float(np.median(values[mine & recent])) if (mine & recent).any() else None,
            trend=trend,
            best_hours=best,
            better_topics=better,
            lines=[],
        )
        row.lines = _lines(row, metric, min_posts)
        out.append(row)
    return TeamOverview(
        metric=metric,
        n_posts=int(values.size),
        left_out=left_out,
        recent_from=recent_from,
        min_posts=min_posts,
        topics=names,
        accounts=out,
    )


def _weeks(times: pd.Series, recent: np.ndarray) -> tuple[np.ndarray, list[str]]:
    """Each recent post's week (index into the labels, -1 for older posts), and the labels."""
    import pandas as pd

    index = np.full(len(times), -1, dtype=np.int64)
    if not recent.any():
        return index, []
    starts = period_starts(times[recent], "week")
    span = pd.date_range(starts.min(), starts.max(), freq="W-MON", tz="UTC")
    pos = {ts: k for k, ts in enumerate(span)}
    index[recent] = [pos[ts] for ts in starts]
    return index, [period_label(ts, "week") for ts in span]


def _trend(values: np.ndarray, weeks: tuple[np.ndarray, list[str]], mask: np.ndarray) -> Trend | None:
    index, labels = weeks
    if not labels or not mask.any():
        return None
    totals = np.bincount(index[index >= 0], minlength=len(labels)).astype(np.float64)
    rows = period_rows(values[mask], index[mask], totals, labels, min_n=1, n_resamples=200)
    return trend_of(rows, "week", last=RECENT_WEEKS)


def _best_hours(values: np.ndarray, buckets: np.ndarray, min_posts: int, metric: str) -> BestHours | None:
    """The hour split of segments on the account's own posts; the best bucket with enough posts."""
    if len(set(buckets)) < 2:
        return None
    report = compare_segments(
        values, buckets, order=hour_labels(), min_n=min_posts, n_resamples=500, metric=metric
    )
    enough = [s for s in report.segments if not s.too_small]
    if not enough:
        return None
    s = max(enough, key=lambda s: s.median)
    higher = s.rest_median is not None and s.median > s.rest_median
    return BestHours(
        hours=s.name,
        n=s.n,
        median=s.median,
        rest_median=s.rest_median,
        p_holm=s.p_holm,
        rank_biserial=s.rank_biserial,
        clear=bool(higher and s.p_holm is not None and s.p_holm < DEFAULT_ALPHA),
    )


def ratios_to_usual(values: np.ndarray, accounts: np.ndarray) -> np.ndarray:
    """Each post against its own account's usual level (median), so accounts
    of any size compare. An account whose usual level is 0 (a metric most of
    its posts never get) has no ratio to speak of: NaN, left out of the
    comparisons."""
    usual = {a: float(np.median(values[accounts == a])) for a in np.unique(accounts)}
    level = np.array([usual[a] for a in accounts], dtype=float)
    out = np.full(values.shape, np.nan)
    np.divide(values, level, out=out, where=level > 0)
    return out


def _better_topics(
    ratio: np.ndarray, topic: np.ndarray, mine: np.ndarray, names: list[str], min_posts: int
) -> list[BetterTopic]:
    """Topics where the account's ratios to its usual level beat the rest of the team's."""
    from scipy import stats

    read = []
    for name in names:
        here = topic == name
        own, rest = ratio[here & mine], ratio[here & ~mine]
        own, rest = own[np.isfinite(own)], rest[np.isfinite(rest)]
        if own.size < min_posts or rest.size < min_posts:
            continue
        res = stats.mannwhitneyu(own, rest, alternative="two-sided")
        r = 2.0 * float(res.statistic) / (own.size * rest.size) - 1.0
        read.append((name, own, rest, float(res.pvalue), r))
    adjusted = holm([p for *_, p, _ in read]) if read else np.zeros(0)
    out = [
        BetterTopic(
            topic=name,
            n=int(own.size),
            lift=float(np.median(own)),
            team_lift=float(np.median(rest)),
            p_value=p,
            p_holm=float(q),
            rank_biserial=r,
            clear=bool(q < DEFAULT_ALPHA),
        )
        for (name, own, rest, p, r), q in zip(read, adjusted, strict=True)
        if np.median(own) > np.median(rest)
    ]
    # The rest of the team's lift can be 0 (most of its posts on the topic got
    # none of the metric): such a topic leads.
    return sorted(out, key=lambda t: -(t.lift / t.team_lift) if t.team_lift > 0 else -math.inf)


def _lines(a: AccountOverview, metric: str, min_posts: int) -> list[str]:
    """What the figures say, in plain words."""
    if not a.settled or a.median is None:
        return [f"no settled posts with {metric} yet"]
    lines = [f"median {metric.replace('_', ' ')} {value_text(a.median, metric)}"]
    if a.recent_median is None:
        lines.append("no posts in the last three months")
    else:
        trend = a.trend.reading if a.trend else "too few weeks with posts for a trend"
        lines.append(
            f"last three months: median {value_text(a.recent_median, metric)} over {a.recent_posts} posts; "
            f"week by week, {trend}"
        )
    h = a.best_hours
    if h is None:
        lines.append(f"best hours: too few posts at any hour (fewer than {min_posts} in every slot)")
    else:
        how = "clearly higher than its other hours" if h.clear else "could be chance"
        rest = "" if h.rest_median is None else f" vs {value_text(h.rest_median, metric)} at other hours"
        lines.append(f"best hours: {h.hours} local time (median {value_text(h.median, metric)}{rest}; {how})")
    clear = [t for t in a.better_topics if t.clear]
    maybe = len(a.better_topics) - len(clear)
    more = " more" if clear else ""
    lean = (
        f" ({maybe}{more} {'leans' if maybe == 1 else 'lean'} that way, but could be chance)" if maybe else ""
    )
    if clear:
        parts = [
            f"{t.topic} (×{t.lift:.2f} its usual; the rest of the team ×{t.team_lift:.2f})" for t in clear
        ]
        lines.append(
            "does clearly better than the team, against its usual level, on: " + "; ".join(parts) + lean
        )
    else:
        lines.append("no topic where it clearly does better than the team, against its usual level" + lean)
    return lines
