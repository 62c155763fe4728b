"""Metric names and the target transform.

Counts in social media are heavy-tailed, so every target is modelled on a
``log1p`` scale and turned back with ``expm1`` for people to read.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from .errors import InputError

#: Columns of a metric snapshot, in the order of the canonical CSV.
METRIC_COLUMNS: tuple[str, ...] = (
    "impressions",
    "engagements",
    "likes",
    "reposts",
    "replies",
    "link_clicks",
    "profile_clicks",
)

#: Metrics a forecast or a segment split may be asked for.
TARGETS: tuple[str, ...] = (
    "impressions",
    "engagements",
    "likes",
    "reposts",
    "replies",
    "link_clicks",
    "profile_clicks",
    "engagement_rate",
)


def check_target(name: str) -> str:
    """Return ``name`` if it is a known target, else raise a clear error."""
    if name not in TARGETS:
        raise InputError(
            f"unknown metric {name!r}; choose one of {', '.join(TARGETS)}",
            field="metric",
            value=name,
        )
    return name


def target_value(metrics: Mapping[str, float | int | None], name: str) -> float | None:
    """The raw value of target ``name`` from one post's metrics, or None
    where it was not measured (engagement_rate needs impressions > 0)."""
    if name == "engagement_rate":
        imp = metrics.get("impressions")
        eng = metrics.get("engagements")
        if imp is None or eng is None or imp <= 0:
            return None
        return float(eng) / float(imp)
    value = metrics.get(name)
    return None if value is None else float(value)


def to_log(values: np.ndarray | float) -> np.ndarray | float:
    return np.log1p(values)


def from_log(values: np.ndarray | float) -> np.ndarray | float:
    return np.expm1(values)
