"""Rolling-origin backtests: train on the past, calibrate on the next
block, test on the block after, and compare with simple baselines on the
same blocks.

Baselines (each a point forecast on the log scale):
- account trailing median: the ``baseline`` feature itself;
- precedents' median: the median of the nearest earlier posts (pure
  nearest neighbours), the ``team_median`` feature;
- timing only: the same quantile model and calibration, fed only the hour
  and weekday features.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from .errors import InputError
from .evaluation import coverage, mae, mean_width, rolling_origin_splits, spearman
from .features import TIMING_FEATURES
from .regressor import QuantileForecaster


def _scores(y: np.ndarray, med: np.ndarray, lo: np.ndarray | None = None,
            hi: np.ndarray | None = None) -> dict[str, float | None]:
    out: dict[str, float | None] = {
        "mae_log": mae(y, med),
        "spearman": spearman(y, med),
        "coverage": None,
        "mean_width_log": None,
    }
    if lo is not None and hi is not None:
        out["coverage"] = coverage(y, lo, hi)
        out["mean_width_log"] = mean_width(lo, hi)
    return out


def run_backtest(
    X: np.ndarray,
    y: np.ndarray,
    times: np.ndarray,
    *,
    feature_names: Sequence[str],
    coverage_level: float = 0.8,
    n_folds: int = 4,
    params: dict[str, Any] | None = None,
) -> dict[str, Any]:
    """Evaluate the model and baselines fold by fold; pooled scores too."""
    names = list(feature_names)
    if X.shape[1] != len(names):
        raise InputError("feature_names do not match X")
    params = dict(params or {})
    col = {n: i for i, n in enumerate(names)}
    timing_cols = [col[n] for n in TIMING_FEATURES]
    pooled: dict[str, list[np.ndarray]] = {k: [] for k in (
        "y", "med", "lo", "hi", "acct", "prec", "t_med", "t_lo", "t_hi")}
    level_hits: dict[float, list[np.ndarray]] = {}
    folds = []
    for i, (tr, ca, te) in enumerate(rolling_origin_splits(times, n_folds=n_folds)):
        model = QuantileForecaster(**params).fit(X[tr], y[tr], X[ca], y[ca], feature_names=names)
        lo, med, hi = model.predict(X[te], coverage=coverage_level)
        for level in model.levels_:
            l_lo, _, l_hi = model.predict(X[te], coverage=level)
            level_hits.setdefault(level, []).append((y[te] >= l_lo) & (y[te] <= l_hi))
        fallback = float(np.median(y[tr]))
        acct = np.where(np.isnan(X[te, col["baseline"]]), fallback, X[te, col["baseline"]])
        prec = np.where(np.isnan(X[te, col["team_median"]]), fallback, X[te, col["team_median"]])
        tmodel = QuantileForecaster(**{**params, "levels": (coverage_level,)}).fit(
            X[tr][:, timing_cols], y[tr], X[ca][:, timing_cols], y[ca],
            feature_names=list(TIMING_FEATURES),
        )
        t_lo, t_med, t_hi = tmodel.predict(X[te][:, timing_cols], coverage=coverage_level)
        for k, v in (("y", y[te]), ("med", med), ("lo", lo), ("hi", hi), ("acct", acct),
                     ("prec", prec), ("t_med", t_med), ("t_lo", t_lo), ("t_hi", t_hi)):
            pooled[k].append(v)
        folds.append({
            "fold": i + 1,
            "train": len(tr), "calibration": len(ca), "test": len(te),
            "test_from": float(np.min(times[te])), "test_to": float(np.max(times[te])),
            "model": _scores(y[te], med, lo, hi),
            "account_median": _scores(y[te], acct),
            "precedents_median": _scores(y[te], prec),
            "timing_only": _scores(y[te], t_med, t_lo, t_hi),
        })
    p = {k: np.concatenate(v) for k, v in pooled.items()}
    return {
        "coverage_nominal": coverage_level,
        "n_folds": n_folds,
        "n_test": int(len(p["y"])),
        "model": _scores(p["y"], p["med"], p["lo"], p["hi"]),
        "baselines": {
            "account_median": _scores(p["y"], p["acct"]),
            "precedents_median": _scores(p["y"], p["prec"]),
            "timing_only": _scores(p["y"], p["t_med"], p["t_lo"], p["t_hi"]),
        },
        "coverage_by_level": {
            f"{lvl:g}": float(np.concatenate(h).mean()) for lvl, h in sorted(level_hits.items())
        },
        "folds": folds,
    }
