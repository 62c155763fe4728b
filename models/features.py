"""Features of a post: its precedents, its account's baseline, its timing
and its text form.

No leakage: the features of a post published at time t use only posts
published *and mature* by then (posted at or before ``t - maturity``), so
their metrics were settled when the post went out. A draft is treated the
same way with the planned time, and with "now" as a further limit, since
nothing later is known.

Everything here works on plain arrays (``History``); the service builds
them from the store.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import cast

import numpy as np

from models.errors import InputError

NEIGHBOUR_STATS = ("wmean", "median", "spread", "max", "top_sim", "n_similar", "days_since_top")

#: Feature names in column order, and the group each one explains.
FEATURE_GROUPS: dict[str, str] = {
    **{f"team_{s}": "precedents" for s in NEIGHBOUR_STATS},
    **{f"own_{s}": "precedents" for s in NEIGHBOUR_STATS},
    "baseline": "account baseline",
    "baseline_n": "account baseline",
    "hour_sin": "timing",
    "hour_cos": "timing",
    "weekday": "timing",
    "length": "text form",
    "has_link": "text form",
    "hashtags": "text form",
    "mentions": "text form",
    "has_media": "text form",
}
FEATURE_NAMES: tuple[str, ...] = tuple(FEATURE_GROUPS)
GROUPS: tuple[str, ...] = ("precedents", "timing", "account baseline", "text form")
TIMING_FEATURES: tuple[str, ...] = ("hour_sin", "hour_cos", "weekday")
_TIMING_AT = FEATURE_NAMES.index(TIMING_FEATURES[0])

_HASHTAG = re.compile(r"(?<!\w)#\w+")
_MENTION = re.compile(r"(?<!\w)@\w+")
DAY = 86400.0


@dataclass(frozen=True, slots=True)
class FeatureParams:
    k: int = 20
    maturity_s: float = 48 * 3600.0
    similar_threshold: float = 0.5
    baseline_n: int = 20


@dataclass(slots=True)
class History:
    """Past posts as arrays, sorted by time.

    ``log_target`` is NaN where the metric is missing; such posts are never
    neighbours and never training rows.
    """

    pk: np.ndarray  # int64 store row ids
    time: np.ndarray  # float64 seconds since the epoch, UTC
    account: np.ndarray  # int64 account codes
    log_target: np.ndarray  # float64
    vectors: np.ndarray  # float32 (n, d), unit rows
    _settled: dict[int, tuple[np.ndarray, np.ndarray]] = field(
        default_factory=dict, init=False, repr=False, compare=False
    )

    def __post_init__(self) -> None:
        n = len(self.pk)
        for name in ("time", "account", "log_target"):
            if len(getattr(self, name)) != n:
                raise InputError(f"History.{name} has {len(getattr(self, name))} rows, expected {n}")
        if len(self.vectors) != n:
            raise InputError(f"History.vectors has {len(self.vectors)} rows, expected {n}")
        if n > 1 and np.any(np.diff(self.time) < 0):
            raise InputError("History rows must be sorted by time")

    def __len__(self) -> int:
        return len(self.pk)

    def settled_rows(self, account: int | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Rows that have the metric (of one account, or all), in time order,
        and their times: worked out once per History (it is never changed
        after it is made), so a draft's eligible posts are a binary search
        rather than a pass over every post."""
        key = -1 if account is None else account
        hit = self._settled.get(key)
        if hit is None:
            has = ~np.isnan(self.log_target)
            rows = np.flatnonzero(has if account is None else has & (self.account == account))
            hit = self._settled[key] = (rows, self.time[rows])
        return hit

    def eligible_rows(self, t: float, params: FeatureParams, account: int | None = None) -> np.ndarray:
        """The rows ``eligible`` marks at ``t`` (of one account, or all), in time order."""
        rows, times = self.settled_rows(account)
        return rows[: int(np.searchsorted(times, t - params.maturity_s, side="right"))]


_LINK = re.compile(r"(?i)\b(?:https?://|www\.)\S+")


def has_link(text: str) -> bool:
    """Whether a text carries a link (a URL with a scheme, or www.)."""
    return bool(_LINK.search(text))


def text_form(text: str, has_link: bool, has_media: bool) -> list[float]:
    return [
        float(len(text)),
        float(has_link),
        float(len(_HASHTAG.findall(text))),
        float(len(_MENTION.findall(text))),
        float(has_media),
    ]


def timing(local_hour: float, weekday: int) -> list[float]:
    """Cyclic hour of day (so 23h and 0h are neighbours) and the weekday."""
    angle = 2 * np.pi * (local_hour / 24.0)
    return [float(np.sin(angle)), float(np.cos(angle)), float(weekday)]


def neighbour_stats(
    sims: np.ndarray, logs: np.ndarray, ages_days: np.ndarray, *, threshold: float
) -> tuple[list[float], np.ndarray]:
    """Summary of neighbours (sorted by similarity, best first) and the
    weight each got in the similarity-weighted mean."""
    if len(sims) == 0:
        return [np.nan] * 6 + [np.nan], np.zeros(0)
    w = np.clip(sims, 0.0, None)
    # An all-dissimilar neighbourhood still has a mean: fall back to equal weights.
    w = w / w.sum() if w.sum() > 0 else np.full(len(sims), 1.0 / len(sims))
    wmean = float(np.dot(w, logs))
    spread = float(np.sqrt(np.dot(w, (logs - wmean) ** 2)))
    stats = [
        wmean,
        float(np.median(logs)),
        spread,
        float(np.max(logs)),
        float(sims[0]),
        float(np.sum(sims >= threshold)),
        float(ages_days[0]),
    ]
    return stats, w


def baseline(history: History, account: int, t: float, params: FeatureParams) -> tuple[float, float]:
    """Median log target of the account's last N posts mature by ``t``."""
    rows, times = history.settled_rows(account)
    end = int(np.searchsorted(times, t - params.maturity_s, side="right"))
    start = max(end - params.baseline_n, 0) if params.baseline_n > 0 else 0
    logs = history.log_target[rows[start:end]]
    if len(logs) == 0:
        return np.nan, 0.0
    return float(np.median(logs)), float(len(logs))


@dataclass(slots=True)
class Neighbourhood:
    """Row indices into the History of a post's neighbours, best first."""

    team: np.ndarray
    team_sims: np.ndarray
    own: np.ndarray
    own_sims: np.ndarray


def assemble(
    history: History,
    hood: Neighbourhood,
    *,
    t: float,
    account: int,
    local_hour: float,
    weekday: int,
    form: Sequence[float],
    params: FeatureParams,
) -> tuple[np.ndarray, dict[int, float]]:
    """One feature row, and each neighbour's weight (by History row).

    The single place that turns a neighbourhood into features, for training
    rows and drafts alike.
    """
    row: list[float] = []
    weights: dict[int, float] = {}
    for idx, sims in ((hood.team, hood.team_sims), (hood.own, hood.own_sims)):
        ages = (t - history.time[idx]) / DAY
        stats, w = neighbour_stats(sims, history.log_target[idx], ages, threshold=params.similar_threshold)
        row.extend(stats)
        if idx is hood.team:
            weights = {int(i): float(x) for i, x in zip(idx, w, strict=True)}
    row.extend(baseline(history, account, t, params))
    row.extend(timing(local_hour, weekday))
    row.extend(form)
    return np.asarray(row, dtype=np.float64), weights


def with_timing(x: np.ndarray, *, local_hour: float, weekday: int) -> np.ndarray:
    """A copy of the feature row ``x`` (from :func:`assemble`) with its timing
    columns for another local hour and weekday."""
    out = np.array(x, dtype=np.float64)
    out[_TIMING_AT : _TIMING_AT + len(TIMING_FEATURES)] = timing(local_hour, weekday)
    return out


def eligible(history: History, t: float, params: FeatureParams, rows: np.ndarray | None = None) -> np.ndarray:
    """Posts whose settled metric was known at time ``t``: a mask over the
    whole history, or over ``rows`` only (a draft must not pay a pass over
    the history to judge the few posts it found)."""
    if rows is None:
        return cast(np.ndarray, (history.time <= t - params.maturity_s) & ~np.isnan(history.log_target))
    return cast(
        np.ndarray, (history.time[rows] <= t - params.maturity_s) & ~np.isnan(history.log_target[rows])
    )


def draft_neighbourhood(
    history: History,
    team: tuple[np.ndarray, np.ndarray],
    own: tuple[np.ndarray, np.ndarray],
    *,
    t: float,
    params: FeatureParams,
) -> Neighbourhood:
    """A draft's neighbourhood from two nearest-neighbour answers, each
    ``(History rows, similarities)`` best first: across the team and within
    the draft's account. Posts not eligible at ``t`` are dropped."""
    parts = []
    for rows, sims in (team, own):
        keep = eligible(history, t, params, rows)
        parts.extend([rows[keep][: params.k], sims[keep][: params.k]])
    return Neighbourhood(*parts)
