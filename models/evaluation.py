"""Forecast metrics and time-ordered evaluation splits.

Metrics are plain means over rows, so they match their scikit-learn and
SciPy namesakes (the tests check that). Splits never let the model see the
future: training, calibration and test blocks follow each other in time.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from models.errors import InputError


def _vectors(named: dict[str, ArrayLike], *, infinite_ok: tuple[str, ...] = ()) -> list[np.ndarray]:
    """Non-empty 1-D float arrays of one length, or InputError. NaN is never
    accepted; infinity only for the names in ``infinite_ok`` (band bounds:
    a too-small calibration block gives an honest infinite bound)."""
    out = []
    for name, value in named.items():
        try:
            arr = np.asarray(value, dtype=float)
        except (TypeError, ValueError) as exc:
            raise InputError(f"{name} must be numeric: {exc}", field=name) from None
        if arr.ndim != 1:
            raise InputError(f"{name} must be 1-D, got shape {arr.shape}", field=name)
        if np.isnan(arr).any() or (name not in infinite_ok and np.isinf(arr).any()):
            raise InputError(f"{name} contains NaN or infinite values", field=name)
        out.append(arr)
    lengths = {arr.shape[0] for arr in out}
    if len(lengths) != 1:
        sizes = ", ".join(f"{n}={a.shape[0]}" for n, a in zip(named, out, strict=True))
        raise InputError(f"arrays differ in length ({sizes})")
    if 0 in lengths:
        raise InputError("no rows to evaluate")
    return out


def pinball_loss(y: ArrayLike, q: ArrayLike, alpha: float) -> float:
    """Mean quantile (pinball) loss of predictions ``q`` of the
    ``alpha``-quantile: ``alpha * d`` if ``d = y - q >= 0``, else
    ``(alpha - 1) * d``."""
    alpha = float(alpha)
    if not 0.0 <= alpha <= 1.0:
        raise InputError(f"alpha must lie in [0, 1], got {alpha}", field="alpha", value=alpha)
    y_, q_ = _vectors({"y": y, "q": q})
    d = y_ - q_
    return float(np.mean(np.where(d >= 0, alpha * d, (alpha - 1.0) * d)))


def mae(y: ArrayLike, yhat: ArrayLike) -> float:
    """Mean absolute error."""
    y_, p_ = _vectors({"y": y, "yhat": yhat})
    return float(np.mean(np.abs(y_ - p_)))


def _average_ranks(x: np.ndarray) -> np.ndarray:
    """1-based ranks; tied values share the mean of the ranks they span."""
    order = np.argsort(x, kind="stable")
    sorted_x = x[order]
    # Start of each run of equal values in sorted order.
    starts = np.flatnonzero(np.r_[True, sorted_x[1:] != sorted_x[:-1]])
    ends = np.r_[starts[1:], x.size]
    run_rank = (starts + ends + 1) / 2.0  # mean of ranks starts+1 .. ends
    ranks = np.empty(x.size)
    ranks[order] = np.repeat(run_rank, ends - starts)
    return ranks


def spearman(y: ArrayLike, yhat: ArrayLike) -> float:
    """Spearman's rank correlation: Pearson correlation of average ranks.
    NaN when either side is constant (no ranking to correlate)."""
    y_, p_ = _vectors({"y": y, "yhat": yhat})
    ry = _average_ranks(y_) - (y_.size + 1) / 2.0
    rp = _average_ranks(p_) - (p_.size + 1) / 2.0
    denom = math.sqrt(float(ry @ ry) * float(rp @ rp))
    if denom == 0.0:
        return math.nan
    return float(np.clip((ry @ rp) / denom, -1.0, 1.0))


def coverage(y: ArrayLike, lo: ArrayLike, hi: ArrayLike) -> float:
    """Share of rows with ``lo <= y <= hi`` (bounds included)."""
    y_, lo_, hi_ = _vectors({"y": y, "lo": lo, "hi": hi}, infinite_ok=("lo", "hi"))
    return float(np.mean((lo_ <= y_) & (y_ <= hi_)))


def mean_width(lo: ArrayLike, hi: ArrayLike) -> float:
    """Mean band width ``hi - lo``."""
    lo_, hi_ = _vectors({"lo": lo, "hi": hi}, infinite_ok=("lo", "hi"))
    return float(np.mean(hi_ - lo_))


def _time_keys(times: Any) -> np.ndarray:
    """Sortable numeric keys: numbers, datetime64, or datetime objects."""
    arr = np.asarray(times)
    if arr.ndim != 1:
        raise InputError(f"times must be 1-D, got shape {arr.shape}", field="times")
    if arr.dtype.kind == "M":
        if np.isnat(arr).any():
            raise InputError("times contain NaT", field="times")
        return arr.astype("datetime64[ns]").astype(np.int64)
    if arr.dtype.kind == "O" and arr.size and all(hasattr(t, "timestamp") for t in arr):
        arr = np.array([t.timestamp() for t in arr], dtype=float)
    try:
        keys = arr.astype(float)
    except (TypeError, ValueError):
        raise InputError("times must be numbers, datetime64 or datetimes", field="times") from None
    if not np.isfinite(keys).all():
        raise InputError("times contain NaN or infinite values", field="times")
    return keys


def rolling_origin_splits(
    times: ArrayLike,
    *,
    n_folds: int = 4,
    min_train_fraction: float = 0.4,
    cal_fraction: float = 0.15,
    test_fraction: float | None = None,
) -> Iterator[tuple[np.ndarray, np.ndarray, np.ndarray]]:
    """Rolling-origin (expanding window) splits in time order.

    Rows are sorted by time (stably), giving positions ``0 .. N-1``. With

    - ``n0 = ceil(min_train_fraction * N)`` initial training rows,
    - ``c = ceil(cal_fraction * N)`` calibration rows,
    - ``t = floor(test_fraction * N)`` test rows per fold, or, when
      ``test_fraction`` is None, ``t = floor((N - n0 - c) / n_folds)`` so
      the folds' test blocks use up the rest of the data,

    fold ``i`` (``0 <= i < n_folds``) cuts the sorted rows at
    ``a = n0 + i*t``, ``b = a + c`` and ``e = b + t`` into
    train ``[0, a)``, calibration ``[a, b)`` and test ``[b, e)``. The origin
    ``a`` moves forward by ``t`` per fold, so training grows, and test
    blocks are consecutive and never overlap.

    Rows with equal times must not straddle a cut (that would break
    "every train time < every cal time < every test time"), so each cut
    moves forward to the next position where the time changes (or ``N``).

    Returns an iterator of ``(train_idx, cal_idx, test_idx)``: indices into ``times``, each
    in time order. Raises InputError if the fractions do not fit in the
    data or any block of any fold would be empty.
    """
    keys = _time_keys(times)
    n = keys.size
    if int(n_folds) != n_folds or n_folds < 1:
        raise InputError(f"n_folds must be a positive integer, got {n_folds}", field="n_folds")
    n_folds = int(n_folds)
    for name, frac in (("min_train_fraction", min_train_fraction), ("cal_fraction", cal_fraction)):
        if not 0.0 < frac < 1.0:
            raise InputError(f"{name} must lie in (0, 1), got {frac}", field=name)
    if test_fraction is not None and not 0.0 < test_fraction < 1.0:
        raise InputError(f"test_fraction must lie in (0, 1), got {test_fraction}", field="test_fraction")

    n0 = math.ceil(min_train_fraction * n)
    c = math.ceil(cal_fraction * n)
    t = math.floor(test_fraction * n) if test_fraction is not None else (n - n0 - c) // n_folds
    if n0 < 1 or c < 1 or t < 1 or n0 + c + n_folds * t > n:
        raise InputError(
            f"{n} rows are too few for {n_folds} folds with these fractions "
            f"(initial train {n0}, calibration {c}, test {t} rows per fold)",
            field="times",
            hint="use fewer folds or collect more history",
        )

    order = np.argsort(keys, kind="stable")
    sorted_keys = keys[order]
    # cut_ok[p]: a cut before sorted position p separates distinct times.
    cut_ok = np.r_[True, sorted_keys[1:] != sorted_keys[:-1], True]
    valid_cuts = np.flatnonzero(cut_ok)

    def snap(p: int) -> int:
        return int(valid_cuts[np.searchsorted(valid_cuts, p)])

    # Built in full before returning, so bad input fails at the call.
    folds: list[tuple[np.ndarray, np.ndarray, np.ndarray]] = []
    for i in range(n_folds):
        a = snap(n0 + i * t)
        b = snap(n0 + i * t + c)
        e = snap(n0 + i * t + c + t)
        if not 0 < a < b < e:
            raise InputError(
                f"fold {i + 1}: tied times leave an empty block "
                f"(train {a}, calibration {b - a}, test {e - b} rows)",
                field="times",
                hint="use fewer folds or coarser fractions",
            )
        folds.append((order[:a].copy(), order[a:b].copy(), order[b:e].copy()))
    return iter(folds)
