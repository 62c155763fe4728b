"""Checked numeric inputs of the estimators: a 2-D feature matrix and a 1-D target."""

from __future__ import annotations

from typing import Any

import numpy as np

from models.errors import InputError


def as_matrix(name: str, X: Any, n_features: int | None = None) -> np.ndarray:
    try:
        arr = np.asarray(X, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name} must be numeric: {exc}", field=name) from None
    if arr.ndim != 2:
        raise InputError(f"{name} must be 2-D (rows x features), got shape {arr.shape}", field=name)
    if n_features is not None and arr.shape[1] != n_features:
        raise InputError(f"{name} has {arr.shape[1]} features, the model expects {n_features}", field=name)
    # NaN is a missing feature (no baseline yet, no neighbours), which
    # LightGBM routes natively; infinities are bugs upstream.
    if np.isinf(arr).any():
        raise InputError(f"{name} contains infinite values", field=name)
    return arr


def as_target(name: str, y: Any, n_rows: int) -> np.ndarray:
    try:
        arr = np.asarray(y, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name} must be numeric: {exc}", field=name) from None
    if arr.ndim != 1 or arr.shape[0] != n_rows:
        raise InputError(f"{name} must be 1-D with {n_rows} values, got shape {arr.shape}", field=name)
    if not np.isfinite(arr).all():
        raise InputError(f"{name} contains NaN or infinite values", field=name)
    return arr
