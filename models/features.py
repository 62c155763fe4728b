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
from dataclasses import dataclass

import numpy as np

from .errors import InputError

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
    mask = (history.account == account) & (history.time <= t - params.maturity_s)
    mask &= ~np.isnan(history.log_target)
    logs = history.log_target[mask][-params.baseline_n :]
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


def _top(sims: np.ndarray, valid: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    cand = np.flatnonzero(valid)
    if len(cand) == 0:
        return cand, np.zeros(0, dtype=np.float32)
    s = sims[cand]
    if len(cand) > k:
        part = np.argpartition(-s, k - 1)[:k]
        cand, s = cand[part], s[part]
    # Stable order: similarity descending, then earlier index first.
    order = np.lexsort((cand, -s))
    return cand[order], s[order]


def eligible(history: History, t: float, params: FeatureParams) -> np.ndarray:
    """Posts whose settled metric was known at time ``t``."""
    return (history.time <= t - params.maturity_s) & ~np.isnan(history.log_target)


def training_matrix(
    history: History,
    *,
    local_hours: np.ndarray,
    weekdays: np.ndarray,
    forms: np.ndarray,
    params: FeatureParams,
    block: int = 256,
) -> np.ndarray:
    """Feature rows for every post in ``history`` (leak-free, see module doc).

    Similarities are exact inner products computed block by block; each
    block only looks at the posts that came before its last post.
    """
    n = len(history)
    X = np.empty((n, len(FEATURE_NAMES)), dtype=np.float64)
    for start in range(0, n, block):
        stop = min(n, start + block)
        horizon = int(np.searchsorted(history.time, history.time[stop - 1], side="right"))
        S = history.vectors[start:stop] @ history.vectors[:horizon].T
        for r, i in enumerate(range(start, stop)):
            t = history.time[i]
            ok = eligible(history, t, params)[:horizon]
            team, team_s = _top(S[r], ok, params.k)
            own, own_s = _top(S[r], ok & (history.account[:horizon] == history.account[i]), params.k)
            X[i], _ = assemble(
                history, Neighbourhood(team, team_s, own, own_s), t=t,
                account=int(history.account[i]), local_hour=float(local_hours[i]),
                weekday=int(weekdays[i]), form=forms[i], params=params,
            )
    return X


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
    ok = eligible(history, t, params)
    parts = []
    for rows, sims in (team, own):
        keep = ok[rows]
        parts.extend([rows[keep][: params.k], sims[keep][: params.k]])
    return Neighbourhood(*parts)
