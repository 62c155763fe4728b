"""Surprises: settled posts that did far better or worse than the forecast
that would have been made for them at their time (out of sample, in time
order, as the backtest makes them), beyond its interval; each with the
precedents the forecast saw and what moved it."""

from __future__ import annotations

from datetime import UTC, datetime

import numpy as np
from pydantic import BaseModel, Field

from models import features as F
from models.analyst_plots import plot_intervals
from models.explain import describe, group_contributions
from models.metrics import DEFAULT_COVERAGE, DEFAULT_METRIC, from_log
from models.stacking import ALL_FEATURES, ALL_GROUPS, STACK_PARAMS
from models.surprises import beyond_interval, out_of_sample, pick
from service.answers import Instant
from service.clock import now_utc
from service.datadir import DataDir
from service.forecast.training import backtest_inputs
from service.history.view import feature_params

DEFAULT_TOP = 5
PRECEDENTS = 3
NOTE = (
    "Surprises describe this team's own history: what the forecast did not know is an "
    "association with the post, not a proven cause."
)


class SurprisePrecedent(BaseModel):
    post_id: str
    account: str
    posted_at: Instant
    days_before: float = Field(description="How long before the surprising post it went out")
    text: str
    similarity: float
    value: float


class Surprise(BaseModel):
    post_id: str
    account: str
    posted_at: Instant
    text: str
    outcome: float
    low: float
    median: float
    high: float
    factor: float = Field(description="Outcome over the nearer interval end (above 1: better)")
    direction: str = Field(description="better or worse")
    precedents: list[SurprisePrecedent]
    moved: list[str] = Field(description="What moved the forecast, one line per group of features")


class SurprisesAnswer(BaseModel):
    metric: str
    coverage: float
    n_forecast: int = Field(description="Settled posts forecast out of sample")
    outside: int = Field(description="Of them, outcomes outside the interval")
    better: list[Surprise]
    worse: list[Surprise]
    note: str = NOTE


def surprises(
    ws: DataDir,
    *,
    metric: str = DEFAULT_METRIC,
    coverage: float = DEFAULT_COVERAGE,
    top: int = DEFAULT_TOP,
    n_folds: int = 4,
    now: datetime | None = None,
) -> SurprisesAnswer:
    now = now or now_utc()
    view, keep, X, y, times = backtest_inputs(ws, metric, now=now)
    oos = out_of_sample(
        X, y, times, feature_names=ALL_FEATURES, params=STACK_PARAMS, coverage=coverage, n_folds=n_folds
    )
    yt = y[oos.rows]
    beyond = beyond_interval(yt, oos.low, oos.high)
    up, down = pick(beyond, top)
    maturity = feature_params(ws.settings).maturity_s
    hist = view.history
    frame = view.frame
    assert frame is not None  # a view built here (not kept between commands) carries its frame

    def back(v: float) -> float:
        return max(float(from_log(v)), 0.0)

    def one(j: int) -> Surprise:
        r = int(keep[oos.rows[j]])
        t = float(hist.time[r])
        settled = np.flatnonzero((hist.time <= t - maturity) & np.isfinite(hist.log_target))
        found_rows, sims = ws.retrieval.rows(view, hist.vectors[r], PRECEDENTS, allowed=settled)
        _, groups = group_contributions(oos.contributions[j], ALL_FEATURES, ALL_GROUPS)
        edge = oos.high[j] if beyond[j] > 0 else oos.low[j]
        return Surprise(
            post_id=str(frame["post_id"].iat[r]),
            account=str(frame["account"].iat[r]),
            posted_at=datetime.fromtimestamp(t, tz=UTC),
            text=str(frame["text"].iat[r]),
            outcome=back(yt[j]),
            low=back(oos.low[j]),
            median=back(oos.median[j]),
            high=back(oos.high[j]),
            factor=float(np.exp(yt[j] - edge)),
            direction="better" if beyond[j] > 0 else "worse",
            precedents=[
                SurprisePrecedent(
                    post_id=str(frame["post_id"].iat[int(p)]),
                    account=str(frame["account"].iat[int(p)]),
                    posted_at=datetime.fromtimestamp(float(hist.time[int(p)]), tz=UTC),
                    days_before=round((t - float(hist.time[int(p)])) / 86400.0, 1),
                    text=str(frame["text"].iat[int(p)]),
                    similarity=float(s),
                    value=back(hist.log_target[int(p)]),
                )
                for p, s in zip(found_rows, sims, strict=True)
            ],
            moved=[describe(g, groups[g]).summary for g in F.GROUPS],
        )

    return SurprisesAnswer(
        metric=metric,
        coverage=coverage,
        n_forecast=int(yt.size),
        outside=int((beyond != 0).sum()),
        better=[one(int(j)) for j in up],
        worse=[one(int(j)) for j in down],
    )


def render(a: SurprisesAnswer, fmt: str = "png") -> bytes:
    """Each surprise's outcome against its interval, on a log axis."""
    items = [*a.better, *a.worse]
    return plot_intervals(
        [s.post_id for s in items],
        [s.low for s in items],
        [s.high for s in items],
        [s.outcome for s in items],
        metric=a.metric.replace("_", " "),
        caption=a.note,
        fmt=fmt,
    )


def csv_table(a: SurprisesAnswer) -> tuple[list[str], list[list[str]]]:
    rows = [
        [
            s.direction,
            s.post_id,
            s.account,
            s.posted_at.date().isoformat() if isinstance(s.posted_at, datetime) else "",
            f"{s.outcome:.0f}",
            f"{s.low:.0f}",
            f"{s.high:.0f}",
            f"{s.factor:.2f}",
        ]
        for s in [*a.better, *a.worse]
    ]
    return [
        "direction",
        "post id",
        "account",
        "posted",
        a.metric,
        "interval low",
        "interval high",
        "factor",
    ], rows


__all__ = ["NOTE", "Surprise", "SurprisesAnswer", "csv_table", "render", "surprises"]
