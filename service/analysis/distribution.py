"""The distribution answer: how one metric is spread over the settled posts,
and which heavy-tailed law its top follows (the statistics live in
:mod:`models.distribution`; this module picks the posts and states the answer)."""

from __future__ import annotations

from datetime import datetime

from pydantic import BaseModel, Field

from models.analyst_plots import plot_histogram
from models.distribution import Bin, Summary, TailFits, fit_tail, log_histogram, reading, summarise
from models.errors import InputError
from models.metrics import DEFAULT_METRIC
from service.analysis.settled import LeftOut, settled_posts
from service.answers import Instant
from service.datadir import DataDir

NOTE = (
    "This describes this team's own history: which posts did well is an association "
    "with what they were, not a cause."
)


class DistributionAnswer(BaseModel):
    """The answer to a distribution request (HTTP, CLI ``--json`` and page alike)."""

    metric: str
    account: str | None
    since: Instant | None
    n_posts: int
    zero_posts: int = Field(description="Posts whose value is 0 (left out of the log axis and the fits)")
    left_out: LeftOut
    summary: Summary
    histogram: list[Bin] = Field(description="Counts in bins of equal width on a log axis")
    tail: TailFits | None = Field(description="The fits, or null when too few posts are above 0")
    reading: str
    note: str = NOTE


def distribution(
    ws: DataDir,
    *,
    metric: str = DEFAULT_METRIC,
    account: str | None = None,
    since: datetime | None = None,
    now: datetime | None = None,
) -> DistributionAnswer:
    posts = settled_posts(ws, metric, account=account, since=since, now=now)
    values = posts.values
    positive = values[values > 0]
    summary = summarise(values)
    try:
        tail = fit_tail(positive)
    except InputError:
        tail = None  # too few positive values: the summary still stands
    return DistributionAnswer(
        metric=metric,
        account=account,
        since=since,
        n_posts=int(values.size),
        zero_posts=int((values <= 0).sum()),
        left_out=posts.left_out,
        summary=summary,
        histogram=log_histogram(positive),
        tail=tail,
        reading=reading(summary, tail, metric.replace("_", " ")),
    )


def render(a: DistributionAnswer, fmt: str = "png") -> bytes:
    """The histogram on a log axis with the median, 90th and 99th percentiles marked."""
    s = a.summary
    return plot_histogram(
        [b.low for b in a.histogram],
        [b.high for b in a.histogram],
        [b.count for b in a.histogram],
        {"median": s.median, "90th percentile": s.p90, "99th percentile": s.p99},
        metric=a.metric.replace("_", " "),
        caption=a.note,
        fmt=fmt,
    )


def csv_table(answer: DistributionAnswer) -> tuple[list[str], list[list[str]]]:
    """The histogram as the screen shows it: whole numbers, plain headers."""
    rows = [[f"{b.low:.0f}", f"{b.high:.0f}", str(b.count)] for b in answer.histogram]
    return ["from", "to", "posts"], rows


__all__ = ["NOTE", "DistributionAnswer", "csv_table", "distribution", "render"]
