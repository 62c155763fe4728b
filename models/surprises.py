"""Out-of-sample forecasts of every post in time order, as the backtest makes
them (rolling origin: fit on the past, calibrate on the next block, forecast
the block after), and the posts whose outcome fell far outside them."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from models.evaluation import rolling_origin_splits
from models.metrics import DEFAULT_COVERAGE
from models.stacking import StackedForecaster


@dataclass(slots=True)
class OutOfSample:
    rows: np.ndarray  # positions in X of the forecast posts
    low: np.ndarray  # log scale
    median: np.ndarray
    high: np.ndarray
    contributions: np.ndarray  # (n, n_features + 1) to the median


def out_of_sample(
    X: np.ndarray,
    y: np.ndarray,
    times: np.ndarray,
    *,
    feature_names: Sequence[str],
    params: dict[str, Any],
    coverage: float = DEFAULT_COVERAGE,
    n_folds: int = 4,
) -> OutOfSample:
    parts: dict[str, list[np.ndarray]] = {k: [] for k in ("rows", "low", "median", "high", "contrib")}
    for tr, ca, te in rolling_origin_splits(times, n_folds=n_folds):
        model = StackedForecaster(**{**params, "timing_bootstrap": 0}).fit(
            X[tr], y[tr], X[ca], y[ca], feature_names=list(feature_names), cal_times=times[ca]
        )
        lo, med, hi = model.predict(X[te], coverage=coverage)
        for k, v in (
            ("rows", te),
            ("low", lo),
            ("median", med),
            ("high", hi),
            ("contrib", model.contributions(X[te])),
        ):
            parts[k].append(np.asarray(v))
    cat = {k: np.concatenate(v) for k, v in parts.items()}
    return OutOfSample(cat["rows"], cat["low"], cat["median"], cat["high"], cat["contrib"])


def beyond_interval(y: np.ndarray, low: np.ndarray, high: np.ndarray) -> np.ndarray:
    """Signed distance outside the interval: positive above it, negative below, 0 inside."""
    return np.where(y > high, y - high, np.where(y < low, y - low, 0.0))


def pick(beyond: np.ndarray, top: int) -> tuple[np.ndarray, np.ndarray]:
    """Positions of the ``top`` largest positive and negative distances."""
    up = np.flatnonzero(beyond > 0)
    down = np.flatnonzero(beyond < 0)
    up = up[np.argsort(-beyond[up], kind="stable")][:top]
    down = down[np.argsort(beyond[down], kind="stable")][:top]
    return up, down


__all__ = ["OutOfSample", "beyond_interval", "out_of_sample", "pick"]
