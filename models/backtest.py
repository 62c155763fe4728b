"""Rolling-origin backtests: train on the past, calibrate on the next
block, test on the block after, and compare with simple forecasters on the
same blocks.

The served forecaster (``models.stacking.StackedForecaster``) is refitted
in every fold exactly as in training, so its blend weights are learnt from
each fold's own past. Reported per fold and pooled:

- ``model``: the blend, with its CQR band;
- ``candidates``: each piece the blend may use (boosted trees, the ridge
  text model, the simple forecasters), alone;
- ``baselines``: the simple forecasters: the account's trailing median (the
  ``baseline`` feature), the precedents' median (``team_median``: pure
  nearest neighbours) and the history-wide median (median of the fold's
  training targets); and ``timing_only``: a quantile model fed only the
  hour and weekday features, with its own calibration;
- ``weights``: the blend weights of each fold, and their mean;
- ``learned_neighbours``: the served forecast against the same forecast
  without the learned-neighbours candidate, pooled over the folds, and
  whether training keeps it (``models.learned_rule``).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from models.blend_lp import simple_reference
from models.errors import InputError
from models.evaluation import coverage, mae, mean_width, rolling_origin_splits, spearman
from models.features import TIMING_FEATURES
from models.learned_rule import LEARNED, learned_after
from models.metrics import DEFAULT_COVERAGE
from models.regressor import QuantileForecaster
from models.stacking import CANDIDATES, SIMPLE, StackedForecaster

#: The timing-only comparison model (one thread: the cores are shared).
TIMING_ONLY_PARAMS: dict[str, Any] = {
    "n_estimators": 200,
    "learning_rate": 0.06,
    "num_leaves": 15,
    "min_child_samples": 20,
    "num_threads": 1,
}


def _scores(
    y: np.ndarray, med: np.ndarray, lo: np.ndarray | None = None, hi: np.ndarray | None = None
) -> dict[str, float | None]:
    out: dict[str, float | None] = {
        "mae_log": mae(y, med),
        # Both losses: the blend is fitted for the absolute one, and the
        # squared one shows what that choice costs a mean-minded reader.
        "mse_log": float(np.mean((np.asarray(y, dtype=float) - np.asarray(med, dtype=float)) ** 2)),
        "spearman": spearman(y, med),
        "coverage": None,
        "mean_width_log": None,
    }
    if lo is not None and hi is not None:
        out["coverage"] = coverage(y, lo, hi)
        out["mean_width_log"] = mean_width(lo, hi)
    return out


def _splits(times: np.ndarray, n_folds: int) -> tuple[list[tuple[np.ndarray, np.ndarray, np.ndarray]], int]:
    """Rolling-origin splits with as many of the asked folds as the history
    allows: posts sharing one time (a month's worth of posts dated to the
    month, say) cannot be cut apart, and may leave a later fold empty."""
    error: InputError | None = None
    for k in range(int(n_folds), 0, -1):
        try:
            return list(rolling_origin_splits(times, n_folds=k)), k
        except InputError as exc:
            error = error or exc
    assert error is not None
    raise error


def run_backtest(
    X: np.ndarray,
    y: np.ndarray,
    times: np.ndarray,
    *,
    feature_names: Sequence[str],
    coverage_level: float = DEFAULT_COVERAGE,
    n_folds: int = 4,
    params: dict[str, Any] | None = None,
    timing_only: bool = True,
    learned: bool = True,
) -> dict[str, Any]:
    """Evaluate the served forecaster, its candidates and the simple
    forecasters fold by fold on the same test blocks; pooled scores too."""
    asked = int(n_folds)
    names = list(feature_names)
    if X.shape[1] != len(names):
        raise InputError("feature_names do not match X")
    params = dict(params or {})
    col = {n: i for i, n in enumerate(names)}
    timing_cols = [col[n] for n in TIMING_FEATURES]
    keys = ["y", "med", "med_without", "lo", "hi", "t_med", "t_lo", "t_hi", *CANDIDATES]
    pooled: dict[str, list[np.ndarray]] = {k: [] for k in keys}
    level_hits: dict[float, list[np.ndarray]] = {}
    folds, weights = [], []
    splits, n_folds = _splits(times, n_folds)
    for i, (tr, ca, te) in enumerate(splits):
        # In time order: when the served forecast lost to the better simple
        # forecaster on the earlier folds, this fold serves that one alone.
        fold_back = fallback_after(pooled) if i else None
        # Bootstrap refits of the timing effect only serve the hours answer.
        fold_params = {
            **params,
            "timing_bootstrap": 0,
            "force_candidate": fold_back,
            "learned_neighbours": learned,
        }
        model = StackedForecaster(**fold_params).fit(
            X[tr], y[tr], X[ca], y[ca], feature_names=names, cal_times=times[ca]
        )
        lo, med, hi = model.predict(X[te], coverage=coverage_level)
        for level in model.levels_:
            l_lo, _, l_hi = model.predict(X[te], coverage=level)
            level_hits.setdefault(level, []).append((y[te] >= l_lo) & (y[te] <= l_hi))
        cands = model.candidates(X[te])
        if timing_only:
            tmodel = QuantileForecaster(**{**TIMING_ONLY_PARAMS, "levels": (coverage_level,)}).fit(
                X[tr][:, timing_cols],
                y[tr],
                X[ca][:, timing_cols],
                y[ca],
                feature_names=list(TIMING_FEATURES),
            )
            t_lo, t_med, t_hi = tmodel.predict(X[te][:, timing_cols], coverage=coverage_level)
        else:
            t_lo = t_med = t_hi = np.full(len(te), np.nan)
        # The fold's simple forecasters read the fold's own training block.
        cands["history_median"] = np.full(len(te), float(np.median(y[tr])))
        for k, v in (
            ("y", y[te]),
            ("med", med),
            ("med_without", model.median_without_learned(X[te])),
            ("lo", lo),
            ("hi", hi),
            ("t_med", t_med),
            ("t_lo", t_lo),
            ("t_hi", t_hi),
            *((c, cands[c]) for c in CANDIDATES),
        ):
            pooled[k].append(v)
        summary = model.summary()
        weights.append({**summary["weights"], "timing": summary["timing_weight"]})
        fold: dict[str, Any] = {
            "fold": i + 1,
            "train": len(tr),
            "calibration": len(ca),
            "test": len(te),
            "test_from": float(np.min(times[te])),
            "test_to": float(np.max(times[te])),
            "model": _scores(y[te], med, lo, hi),
            "candidates": {c: _scores(y[te], cands[c]) for c in CANDIDATES},
            "weights": weights[-1],
            "blend_kind": summary["blend_kind"],
            "fallback_to": summary["fallback_to"],
            "fold_fallback": fold_back,
            "learned_neighbours_in_use": summary["learned_neighbours_in_use"],
            "boosted_rounds": summary["boosted_rounds"],
            "left_out_of_boosted": summary["left_out_of_boosted"],
        }
        fold.update({c: fold["candidates"][c] for c in SIMPLE})
        if timing_only:
            fold["timing_only"] = _scores(y[te], t_med, t_lo, t_hi)
        folds.append(fold)
    p = {k: np.concatenate(v) for k, v in pooled.items()}
    candidates = {c: _scores(p["y"], p[c]) for c in CANDIDATES}
    baselines: dict[str, Any] = {c: candidates[c] for c in SIMPLE}
    if timing_only:
        baselines["timing_only"] = _scores(p["y"], p["t_med"], p["t_lo"], p["t_hi"])
    mean_weights = {k: round(float(np.mean([w[k] for w in weights])), 4) for k in weights[0]}
    report = {
        "coverage_nominal": coverage_level,
        "n_folds": n_folds,
        "n_folds_asked": asked,
        "n_test": len(p["y"]),
        "model": _scores(p["y"], p["med"], p["lo"], p["hi"]),
        "baselines": baselines,
        "candidates": candidates,
        "weights": mean_weights,
        "blend_loss": "absolute",
        "fallback_folds": sum(f["blend_kind"] == "fallback" for f in folds),
        # What training serves: the better simple forecaster alone when the
        # pooled folds found the served forecast losing to it, else None.
        "serve_fallback": fallback_after(pooled),
        "coverage_by_level": {
            f"{lvl:g}": float(np.concatenate(h).mean()) for lvl, h in sorted(level_hits.items())
        },
        "text_signal": text_signal(
            p["y"], p["account_median"], {c: p[c] for c in ("text_ridge", "precedents_median", LEARNED)}
        ),
        # Kept in training only when the served forecast beat the one without it.
        "learned_neighbours": {
            **learned_after(p["y"], p["med"], p["med_without"]),
            "offered": learned,
            "folds_in_use": sum(bool(f["learned_neighbours_in_use"]) for f in folds),
        },
        "folds": folds,
    }
    report["note"] = signal_note(report)
    return report


def fallback_after(pooled: dict[str, list[np.ndarray]]) -> str | None:
    """The better simple forecaster over the folds so far
    (``blend_lp.simple_reference``) when the served forecast was worse than
    it on absolute error or rank correlation there; None while the served
    forecast holds up."""
    if not pooled["y"]:
        return None
    y, med = np.concatenate(pooled["y"]), np.concatenate(pooled["med"])
    simple = {c: np.concatenate(pooled[c]) for c in SIMPLE}
    ref = simple_reference(y, simple)

    def rank(f: np.ndarray) -> float:
        r = spearman(y, f)
        return -1.0 if np.isnan(r) else r

    tol = 1e-9
    if mae(y, med) > mae(y, simple[ref]) + tol or rank(med) < rank(simple[ref]) - tol:
        return ref
    return None


#: Below this share of the variance left by the account median, the text is
#: said to explain little (a plain reading; our choice, no source).
TEXT_SHARE_MIN = 0.05
_LEANS = {
    "boosted": "the boosted model of every feature",
    "text_ridge": "the text model",
    "account_median": "your account's recent median",
    "precedents_median": "the median of similar past posts",
    "history_median": "the history-wide median",
    LEARNED: "the learned neighbours",
}


def text_signal(y: np.ndarray, account: np.ndarray, text: dict[str, np.ndarray]) -> dict[str, float]:
    """How much of the difference from the account's recent median each
    text-based forecaster explains: the squared correlation of
    ``forecast - account median`` with ``y - account median`` (test posts)."""
    r = y - account
    out = {}
    for name, f in text.items():
        d = f - account
        ok = np.isfinite(d) & np.isfinite(r)
        share = 0.0
        if ok.sum() > 2 and np.std(d[ok]) > 0 and np.std(r[ok]) > 0:
            share = float(np.corrcoef(d[ok], r[ok])[0, 1] ** 2)
        out[name] = round(share, 4)
    return out


def signal_note(report: dict[str, Any]) -> str | None:
    """One plain line when the text carries little signal, else None.

    The text "explains little" when no text-based forecaster (the ridge
    text model, the precedents' median) explains ``TEXT_SHARE_MIN`` (5%) of
    the test posts' differences from their account's recent median.
    """
    shares = report.get("text_signal") or {}
    if not shares or max(shares.values()) >= TEXT_SHARE_MIN:
        return None
    w = report.get("weights") or {}
    lean = max((c for c in CANDIDATES if c in w), key=lambda c: w[c], default="account_median")
    return (
        "the text of your drafts explains little of the difference in reach in this "
        f"history; the forecast leans on {_LEANS.get(lean, lean)}"
    )
