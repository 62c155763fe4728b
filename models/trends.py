"""A metric over time: posts and median per month or week, and the trend of
the median over the last periods by the Theil–Sen slope.

Theil–Sen (Theil 1950; Sen 1968): the slope is the median of the slopes of
every pair of points; its confidence interval takes the order statistics of
those slopes at ranks ``(N -+ z * sqrt(Var S)) / 2``, where ``N`` is the
number of pairwise slopes and ``Var S = n (n-1) (2n+5) / 18`` (less the tie
terms) is the variance of Kendall's S under no trend (Sen 1968, eq. 2.6;
Gilbert 1987, section 16.4). It is fitted to the log of each period's
median, so the slope reads as a steady percentage change per period and one
viral post cannot tilt it.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np
import numpy.typing as npt
from pydantic import BaseModel, Field

from models.errors import InputError
from models.segments import bootstrap_median_ci

PERIODS: tuple[str, ...] = ("month", "week")
#: Periods the trend is fitted over by default.
DEFAULT_LAST = 12
DEFAULT_CONFIDENCE = 0.95

if TYPE_CHECKING:
    import pandas as pd


def theil_sen(
    x: npt.ArrayLike, y: npt.ArrayLike, *, confidence: float = DEFAULT_CONFIDENCE
) -> tuple[float, float, float, float]:
    """Slope, intercept and the slope's confidence interval (low, high)."""
    from scipy.special import ndtri

    xs, ys = np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)
    if xs.size != ys.size or xs.size < 2:
        raise InputError("a trend needs at least two points", field="periods")
    i, j = np.triu_indices(xs.size, k=1)
    dx = xs[j] - xs[i]
    ok = dx != 0
    if not ok.any():
        raise InputError("a trend needs points at two different times", field="periods")
    slopes = np.sort((ys[j] - ys[i])[ok] / dx[ok])
    slope = float(np.median(slopes))
    intercept = float(np.median(ys) - slope * np.median(xs))
    n = xs.size

    def ties(v: np.ndarray) -> float:
        _, k = np.unique(v, return_counts=True)
        k = k[k > 1].astype(np.float64)
        return float((k * (k - 1) * (2 * k + 5)).sum())

    var_s = (n * (n - 1) * (2 * n + 5) - ties(xs) - ties(ys)) / 18.0
    z = float(-ndtri((1.0 - confidence) / 2.0))
    c = z * math.sqrt(max(var_s, 0.0))
    m = slopes.size
    # 1-based ranks M1 = (N - C) / 2 and M2 + 1 = (N + C) / 2 + 1, rounded.
    lo = max(round((m - c) / 2.0) - 1, 0)
    hi = min(round((m + c) / 2.0), m - 1)
    return slope, intercept, float(slopes[lo]), float(slopes[hi])


def period_starts(times: pd.Series, by: str) -> pd.Series:
    """Each time's period start (UTC midnight of the month's first day, or of the ISO week's Monday)."""
    import pandas as pd

    if by not in PERIODS:
        raise InputError(f"period must be one of {', '.join(PERIODS)}", field="by", value=by)
    t = pd.to_datetime(times, utc=True).dt.tz_localize(None)
    if by == "month":
        start = t.dt.to_period("M").dt.start_time
    else:
        start = t.dt.normalize() - pd.to_timedelta(t.dt.day_of_week, unit="D")
    return start.dt.tz_localize("UTC")


def period_label(start: pd.Timestamp, by: str) -> str:
    if by == "month":
        return f"{start.year:04d}-{start.month:02d}"
    year, week, _ = start.isocalendar()
    return f"{year:04d}-W{week:02d}"


class PeriodRow(BaseModel):
    period: str
    n: int = Field(description="Posts in the period")
    share: float = Field(description="Share of the period's posts (of the whole history's)")
    median: float | None
    ci_low: float | None = Field(description="Bootstrap interval of the median")
    ci_high: float | None
    few_posts: bool = Field(description="Fewer posts than the minimum: read the median as rough")


class Trend(BaseModel):
    periods: int = Field(description="Periods the slope was fitted over (those with posts)")
    slope: float = Field(description="Theil–Sen slope of log(median) per period")
    slope_low: float
    slope_high: float
    change: float = Field(description="exp(slope) - 1: the steady change per period")
    change_low: float
    change_high: float
    clear: bool = Field(description="The slope's confidence interval excludes zero")
    reading: str


def trend_of(
    rows: Sequence[PeriodRow], by: str, *, last: int = DEFAULT_LAST, confidence: float = DEFAULT_CONFIDENCE
) -> Trend | None:
    """The Theil–Sen trend of log(median) over the last ``last`` periods with
    posts and a positive median; None with fewer than three."""
    idx = [k for k, r in enumerate(rows) if r.n > 0 and r.median is not None and r.median > 0]
    idx = [k for k in idx if k >= len(rows) - last]
    if len(idx) < 3:
        return None
    y = [math.log(rows[k].median or 1.0) for k in idx]
    slope, _, low, high = theil_sen(idx, y, confidence=confidence)
    change, c_low, c_high = math.expm1(slope), math.expm1(low), math.expm1(high)
    clear = low > 0 or high < 0
    if clear:
        word = "rising" if slope > 0 else "falling"
        reading = f"{word} about {abs(100 * change):.0f}% a {by}, clearly"
    else:
        reading = f"no clear trend (somewhere between {100 * c_low:+.0f}% and {100 * c_high:+.0f}% a {by})"
    return Trend(
        periods=len(idx),
        slope=slope,
        slope_low=low,
        slope_high=high,
        change=change,
        change_low=c_low,
        change_high=c_high,
        clear=clear,
        reading=reading,
    )


def period_rows(
    values: np.ndarray,
    period_index: np.ndarray,
    totals: np.ndarray,
    labels: Sequence[str],
    *,
    min_n: int,
    confidence: float = DEFAULT_CONFIDENCE,
    n_resamples: int = 1000,
    seed: int = 0,
) -> list[PeriodRow]:
    """One row per period: posts, share of the period's posts, median and its interval."""
    rows = []
    for k, label in enumerate(labels):
        v = values[period_index == k]
        lo: float | None
        hi: float | None
        if v.size:
            lo, hi = bootstrap_median_ci(v, confidence=confidence, n_resamples=n_resamples, seed=seed + k)
            med: float | None = float(np.median(v))
        else:
            lo = hi = med = None
        rows.append(
            PeriodRow(
                period=label,
                n=int(v.size),
                share=float(v.size / totals[k]) if totals[k] else 0.0,
                median=med,
                ci_low=lo,
                ci_high=hi,
                few_posts=bool(v.size < min_n),
            )
        )
    return rows


__all__ = [
    "DEFAULT_LAST",
    "PERIODS",
    "PeriodRow",
    "Trend",
    "period_label",
    "period_rows",
    "period_starts",
    "theil_sen",
    "trend_of",
]
