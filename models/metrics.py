"""Metric names and the target transform.

Counts in social media are heavy-tailed, so every target is modelled on a
``log1p`` scale and turned back with ``expm1`` for people to read.
"""

from __future__ import annotations

from collections.abc import Mapping
from enum import StrEnum
from typing import Any

import numpy as np
import pandas as pd

from models.errors import InputError


class Metric(StrEnum):
    """Metrics a forecast or a segment split may be asked for: the snapshot
    columns and the engagement rate (engagements / impressions)."""

    IMPRESSIONS = "impressions"
    ENGAGEMENTS = "engagements"
    LIKES = "likes"
    REPOSTS = "reposts"
    REPLIES = "replies"
    LINK_CLICKS = "link_clicks"
    PROFILE_CLICKS = "profile_clicks"
    ENGAGEMENT_RATE = "engagement_rate"


#: Metrics a forecast or a segment split may be asked for, as plain names.
TARGETS: tuple[str, ...] = tuple(m.value for m in Metric)
#: Columns of a metric snapshot, in the order of the canonical CSV.
METRIC_COLUMNS: tuple[str, ...] = tuple(m.value for m in Metric if m is not Metric.ENGAGEMENT_RATE)
#: What is forecast when no metric is named.
DEFAULT_METRIC = Metric.IMPRESSIONS
#: Nominal coverage of an interval when none is asked for, and the range that
#: can be asked for (the trained quantile levels span it).
DEFAULT_COVERAGE = 0.8
MIN_COVERAGE, MAX_COVERAGE = 0.5, 0.95
#: Coverage levels a forecaster trains quantile models for; another coverage uses the
#: nearest of them, calibrated (CQR) at the coverage asked for.
TRAINED_LEVELS: tuple[float, ...] = (MIN_COVERAGE, 0.7, DEFAULT_COVERAGE, 0.9, MAX_COVERAGE)


def check_coverage(coverage: float) -> float:
    """Return ``coverage`` if it can be asked for, else raise a clear error."""
    if not MIN_COVERAGE <= coverage <= MAX_COVERAGE:
        raise InputError(
            f"coverage must be a number between {MIN_COVERAGE} and {MAX_COVERAGE}, got {coverage}",
            field="coverage",
            value=coverage,
        )
    return coverage


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
    NaN where it was not measured (engagement_rate needs impressions > 0)."""

    def column(metric: str) -> np.ndarray:
        return np.asarray(columns[metric], dtype=np.float64)  # None becomes NaN

    if name == Metric.ENGAGEMENT_RATE:
        imp, eng = column("impressions"), column("engagements")
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(imp > 0, eng / imp, np.nan)  # NaN > 0 is False
    return column(name)


def target_value(metrics: Mapping[str, float | int | None], name: str) -> float | None:
    """The raw value of target ``name`` from one post's metrics, or None
    where it was not measured (the rule of :func:`target_values`)."""
    wanted = ("impressions", "engagements") if name == Metric.ENGAGEMENT_RATE else (name,)
    value = float(target_values({m: [metrics.get(m)] for m in wanted}, name)[0])
    return None if np.isnan(value) else value


def to_log(values: np.ndarray | float) -> np.ndarray | float:
    return np.log1p(values)


def from_log(values: np.ndarray | float) -> np.ndarray | float:
    return np.expm1(values)
