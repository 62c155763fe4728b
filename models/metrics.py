"""Metric names and the target transform.

Counts in social media are heavy-tailed, so every target is modelled on a
``log1p`` scale and turned back with ``expm1`` for people to read.
"""

from __future__ import annotations

from collections.abc import Mapping
from enum import StrEnum
from typing import TYPE_CHECKING, Any

import numpy as np

from models.constraints import Interval
from models.errors import InputError

if TYPE_CHECKING:
    import pandas as pd


class Metric(StrEnum):
    """Metrics a forecast or a segment split may be asked for: the snapshot
    columns, the engagement rate (engagements / impressions) and impressions
    and engagements per 1,000 followers (the account's count in force at
    the post's time)."""

    IMPRESSIONS = "impressions"
    ENGAGEMENTS = "engagements"
    LIKES = "likes"
    REPOSTS = "reposts"
    REPLIES = "replies"
    LINK_CLICKS = "link_clicks"
    PROFILE_CLICKS = "profile_clicks"
    ENGAGEMENT_RATE = "engagement_rate"
    IMPRESSIONS_PER_1K_FOLLOWERS = "impressions_per_1k_followers"
    ENGAGEMENTS_PER_1K_FOLLOWERS = "engagements_per_1k_followers"


#: Metrics a forecast or a segment split may be asked for, as plain names.
TARGETS: tuple[str, ...] = tuple(m.value for m in Metric)
#: Metrics per 1,000 followers, and the count each one divides.
PER_FOLLOWER: dict[str, str] = {
    Metric.IMPRESSIONS_PER_1K_FOLLOWERS: "impressions",
    Metric.ENGAGEMENTS_PER_1K_FOLLOWERS: "engagements",
}
#: Metrics worked out from others rather than stored.
DERIVED: frozenset[str] = frozenset({Metric.ENGAGEMENT_RATE, *PER_FOLLOWER})
#: Columns of a metric snapshot, in the order of the canonical CSV.
METRIC_COLUMNS: tuple[str, ...] = tuple(m.value for m in Metric if m not in DERIVED)
#: What is forecast when no metric is named.
DEFAULT_METRIC = Metric.IMPRESSIONS
#: Nominal coverage of an interval when none is asked for, and the range that
#: can be asked for (the trained quantile levels span it).
DEFAULT_COVERAGE = 0.8
MIN_COVERAGE, MAX_COVERAGE = 0.5, 0.95
#: Coverage levels a forecaster trains quantile models for; another coverage uses the
#: nearest of them, calibrated (CQR) at the coverage asked for.
TRAINED_LEVELS: tuple[float, ...] = (MIN_COVERAGE, 0.7, DEFAULT_COVERAGE, 0.9, MAX_COVERAGE)
#: The coverage a forecast can be asked for.
COVERAGE = Interval(float, MIN_COVERAGE, MAX_COVERAGE)


def check_coverage(coverage: float) -> float:
    """Return ``coverage`` if it can be asked for, else raise a clear error."""
    return float(COVERAGE.check(coverage, "coverage"))


def check_target(name: str) -> str:
    """Return ``name`` if it is a known target, else raise a clear error."""
    if name not in TARGETS:
        raise InputError(
            f"unknown metric {name!r}; choose one of {', '.join(TARGETS)}",
            field="metric",
            value=name,
        )
    return name


def target_values(columns: Mapping[str, Any] | pd.DataFrame, name: str) -> np.ndarray:
    """Target ``name`` for many posts at once, from their metric columns
    (a DataFrame or a mapping of equal-length sequences), as float64 with
    NaN where it was not measured (engagement_rate needs impressions > 0; a
    per-follower metric a ``followers`` column, with a count above 0)."""

    def column(metric: str) -> np.ndarray:
        return np.asarray(columns[metric], dtype=np.float64)  # None becomes NaN

    if name in PER_FOLLOWER:
        count = column(PER_FOLLOWER[name])
        followers = column("followers") if "followers" in columns else np.full(len(count), np.nan)
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(followers > 0, count / followers * 1000.0, np.nan)
    if name == Metric.ENGAGEMENT_RATE:
        imp, eng = column("impressions"), column("engagements")
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(imp > 0, eng / imp, np.nan)  # NaN > 0 is False
    return column(name)


def without_followers(columns: Mapping[str, Any] | pd.DataFrame, name: str) -> int:
    """How many posts have the count a per-follower metric ``name`` divides
    but no follower count in force at their time (0 for other metrics):
    their metric is missing, not guessed."""
    if name not in PER_FOLLOWER:
        return 0
    count = np.asarray(columns[PER_FOLLOWER[name]], dtype=np.float64)
    if "followers" not in columns:
        return int(np.isfinite(count).sum())
    followers = np.asarray(columns["followers"], dtype=np.float64)
    return int((np.isfinite(count) & ~(followers > 0)).sum())


def target_value(
    metrics: Mapping[str, float | int | None], name: str, *, followers: float | None = None
) -> float | None:
    """The raw value of target ``name`` from one post's metrics (and the
    follower count in force at its time), or None where it was not
    measured (the rule of :func:`target_values`)."""
    if name == Metric.ENGAGEMENT_RATE:
        wanted: tuple[str, ...] = ("impressions", "engagements")
    else:
        wanted = (PER_FOLLOWER.get(name, name),)
    cols: dict[str, list[float | int | None]] = {m: [metrics.get(m)] for m in wanted}
    cols["followers"] = [followers]
    value = float(target_values(cols, name)[0])
    return None if np.isnan(value) else value


def to_log(values: np.ndarray | float) -> np.ndarray | float:
    return np.log1p(values)


def from_log(values: np.ndarray | float) -> np.ndarray | float:
    return np.expm1(values)
