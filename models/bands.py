"""What the two forecasters (models.regressor, models.stacking) share: the fitted
check, the trained level nearest a coverage, a booster's prediction on few rows,
and ordering a band so it holds its median."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from models.errors import NotFittedError
from models.metrics import check_coverage


def check_is_fitted(estimator: object, attribute: str) -> None:
    """NotFittedError unless ``fit`` (or ``load``) set ``attribute``, as
    scikit-learn's ``check_is_fitted`` does with its learned attributes."""
    if not hasattr(estimator, attribute):
        name = type(estimator).__name__
        raise NotFittedError(f"{name} is not fitted yet; call fit(...) or load(...) first", where=name)


def nearest_level(levels: Sequence[float], coverage: float) -> int:
    """Index of the trained level nearest ``coverage`` (ties: the wider)."""
    coverage = check_coverage(coverage)
    gaps = [(abs(c - coverage), -c) for c in levels]
    return min(range(len(gaps)), key=gaps.__getitem__)


def predict_booster(booster: Any, X: np.ndarray, *, contrib: bool = False) -> np.ndarray:
    """A LightGBM booster's predictions (or TreeSHAP contributions) of ``X``."""
    # LightGBM divides by the row count, so an empty batch is answered here.
    if X.shape[0] == 0:
        return np.empty((0, X.shape[1] + 1) if contrib else 0)
    # A forecast predicts a few rows: OpenMP threads cost more than they save
    # there, and fight the service's other work for the cores.
    threads = 1 if X.shape[0] < 1000 else 0
    return np.asarray(booster.predict(X, pred_contrib=contrib, num_threads=threads), dtype=float)


def ordered_band(
    lo: np.ndarray, med: np.ndarray, hi: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(lo, median, hi)`` sorted per row. Separately fitted bounds can cross;
    sorting only ever widens [lo, hi] (to include the median), so a conformal
    guarantee survives and lo <= median <= hi holds."""
    ordered = np.sort(np.stack([lo, med, hi], axis=1), axis=1)
    return ordered[:, 0].copy(), ordered[:, 1].copy(), ordered[:, 2].copy()
