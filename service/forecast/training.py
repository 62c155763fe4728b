"""Training and backtesting a forecaster from the history: leak-free
training rows, the stacked forecaster fitted in time order, a versioned
artefact saved as the data directory's one writer."""

from __future__ import annotations

from datetime import datetime
from typing import Any

import numpy as np

from models import features as F
from models import shared_terms as S
from models.artefact import TrainedModel
from models.backtest import run_backtest
from models.errors import NotReady
from models.metrics import DEFAULT_COVERAGE, DEFAULT_METRIC, check_target, without_followers
from models.stack_columns import ExtraModels, extra_columns
from models.stacking import ALL_FEATURES, STACK_PARAMS, StackedForecaster
from service.clock import now_utc, wall_clock
from service.datadir import DataDir
from service.forecast import shared_columns
from service.history.retrieval import Retriever
from service.history.view import HistoryView, build_view, feature_params
from service.settings import Settings


def training_rows(
    view: HistoryView, params: F.FeatureParams, now: datetime, *, max_posts: int | None = None
) -> np.ndarray:
    """Rows of the view that train: every post settled by ``now`` (only the
    ``max_posts`` most recent of them when set)."""
    keep = np.flatnonzero(F.eligible(view.history, now.timestamp(), params))
    return keep if max_posts is None else keep[-max_posts:]  # the view is sorted by time


def training_set(
    view: HistoryView,
    params: F.FeatureParams,
    now: datetime,
    *,
    max_posts: int | None = None,
    approximate_above: int | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Leak-free features, targets and times of every post settled by ``now``
    (only the ``max_posts`` most recent of them when set; their neighbours
    still come from the whole history)."""
    keep = training_rows(view, params, now, max_posts=max_posts)
    X = Retriever.training_matrix(view, params, rows=keep, approximate_above=approximate_above)
    return X, view.history.log_target[keep], view.history.time[keep]


def scale_options(settings: Settings) -> dict[str, Any]:
    """The training-set options of the scale settings (SOUNDING_TRAIN_*)."""
    return {"max_posts": settings.train_max_posts, "approximate_above": settings.train_approximate_above}


MIN_TRAINING_POSTS = 200


def train(
    ws: DataDir,
    metric: str = DEFAULT_METRIC,
    *,
    now: datetime | None = None,
    backtest: bool = True,
    cal_fraction: float = 0.2,
) -> TrainedModel:
    """Train, backtest and save a new model version for ``metric``, as the
    data directory's one writer (service.storage.locking)."""
    check_target(metric)
    with ws.writing("a training run"):
        return _train(ws, metric, now=now, backtest=backtest, cal_fraction=cal_fraction)


def _train(
    ws: Any, metric: str, *, now: datetime | None, backtest: bool, cal_fraction: float
) -> TrainedModel:
    now = now or now_utc()
    params = feature_params(ws.settings)
    view = build_view(ws.store, metric, with_vectors=True)
    X, y, times = training_set(view, params, now, **scale_options(ws.settings))
    if len(y) < MIN_TRAINING_POSTS:
        missing = without_followers(view.frame, metric) if view.frame is not None else 0
        raise NotReady(
            f"{len(y)} mature posts with {metric}; training needs at least {MIN_TRAINING_POSTS}"
            + (f" ({missing} more have no follower count at their time)" if missing else ""),
            hint="give the accounts' follower counts (`sounding account HANDLE --followers N --since DATE`)"
            if missing
            else "import more history",
        )
    # The text model's time-ordered column and the account code (models.stacking).
    X, columns = with_extra_columns(view, params, now, X, ws.settings)
    text = columns.text
    rows = training_rows(view, params, now, max_posts=ws.settings.train_max_posts)
    order = np.argsort(times, kind="stable")
    X, y, times, rows = X[order], y[order], times[order], rows[order]
    # The calibration block comes after the training block in time.
    cut = round(len(y) * (1 - cal_fraction))
    names: tuple[str, ...] = ALL_FEATURES

    def fit(**extra: Any) -> StackedForecaster:
        return StackedForecaster(**STACK_PARAMS, **extra).fit(
            X[:cut], y[:cut], X[cut:], y[cut:], feature_names=names, cal_times=times[cut:]
        )

    model = fit()
    report: dict[str, Any] = {
        "metric": metric,
        "trained_at": now_utc().isoformat(),
        "data_as_of": now.isoformat(),
        "n_posts": len(y),
        # Per-follower metrics: posts left out for want of a follower count at their time.
        "n_without_followers": without_followers(view.frame, metric) if view.frame is not None else 0,
        "n_train": int(cut),
        "n_calibration": int(len(y) - cut),
        "train_until": datetime.fromtimestamp(times[cut - 1], tz=now.tzinfo).isoformat(),
        "calibration_from": datetime.fromtimestamp(times[cut], tz=now.tzinfo).isoformat(),
        "features": {
            "k": params.k,
            "maturity_hours": params.maturity_s / 3600,
            "similar_threshold": params.similar_threshold,
            "baseline_posts": params.baseline_n,
        },
        # Which vectors the features came from (int8 ONNX vectors differ from fp32 ones).
        "embedding": {k: v for k, v in ws.embedder.info().items() if k != "loaded"},
        "combination": model.summary(),
        "text_model": None if text is None else {"penalty": text.alpha_},
        "learned_neighbours": None if columns.learned is None else columns.learned.summary(),
    }
    report["shared_terms"] = None
    if backtest:
        report["backtest"] = run_backtest(X, y, times, feature_names=ALL_FEATURES, params=STACK_PARAMS)
        # The shared-terms columns, kept only where they improve the backtest.
        cols, with_cols, decision = shared_columns.decide(
            ws.settings.shared_terms, view, ws.store, params, rows, X, y, times, report["backtest"]
        )
        if cols is not None and with_cols is not None:
            X, names = np.hstack([X, cols]), ALL_FEATURES + S.NAMES
            report["backtest"], report["shared_terms"] = with_cols, decision["kind"]
            model = fit()
            report["combination"] = model.summary()
        report["backtest"]["shared_terms"] = decision
        back = report["backtest"].get("serve_fallback")
        # The learned neighbours stay only when the backtest found them helping.
        keep = bool(report["backtest"]["learned_neighbours"]["in_use"])
        if back or (model.learned_in_use_ and not keep):
            # The blend lost to this simple forecaster in time order: serve it;
            # or the learned neighbours did not help there: serve without them.
            model = fit(force_candidate=back, learned_neighbours=keep)
            report["combination"] = model.summary()
        report["note"] = report["backtest"]["note"]
    # Versions sort by the wall clock of training, whatever "now" the data was seen at.
    stamp = wall_clock()  # not SOUNDING_NOW: versions must stay unique
    version = stamp.strftime("%Y%m%dT%H%M%S") + f"{stamp.microsecond // 1000:03d}Z"
    trained = TrainedModel(
        metric=metric,
        version=version,
        features=params,
        forecaster=model,
        report=report,
        text=text,
        learned=columns.learned if model.learned_in_use_ else None,
    )
    trained.save(ws.settings.models_dir)
    return trained


def backtest(
    ws: DataDir,
    metric: str = DEFAULT_METRIC,
    *,
    coverage: float = DEFAULT_COVERAGE,
    n_folds: int = 4,
    now: datetime | None = None,
) -> dict[str, Any]:
    view, rows, X, y, times = backtest_inputs(ws, metric, now=now or now_utc())
    options: dict[str, Any] = {"coverage_level": coverage, "n_folds": n_folds}
    report = run_backtest(X, y, times, feature_names=ALL_FEATURES, params=STACK_PARAMS, **options)
    # What training would decide about the shared-terms columns, with both figures.
    report["shared_terms"] = shared_columns.decide(
        ws.settings.shared_terms,
        view,
        ws.store,
        feature_params(ws.settings),
        rows,
        X,
        y,
        times,
        report,
        **options,
    )[2]
    return report


def with_extra_columns(
    view: HistoryView, params: F.FeatureParams, now: datetime, X: np.ndarray, settings: Settings
) -> tuple[np.ndarray, ExtraModels]:
    """``X`` (rows of ``training_set``) with models.stacking's extra columns,
    and the models behind them (``models.stack_columns.ExtraModels``)."""
    extra, models = extra_columns(
        view.history, maturity_s=params.maturity_s, now=now.timestamp(), params=params
    )
    keep = training_rows(view, params, now, max_posts=settings.train_max_posts)
    return np.hstack([X, extra[keep]]), models


def backtest_inputs(
    ws: DataDir, metric: str, *, now: datetime
) -> tuple[HistoryView, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """What the backtest fits on: the view, its training rows, and their
    features (with the extra columns), targets and times."""
    check_target(metric)
    params = feature_params(ws.settings)
    view = build_view(ws.store, metric, with_vectors=True)
    X, y, times = training_set(view, params, now, **scale_options(ws.settings))
    if len(y) < MIN_TRAINING_POSTS:
        raise NotReady(f"{len(y)} mature posts with {metric}; a backtest needs {MIN_TRAINING_POSTS}")
    X, _ = with_extra_columns(view, params, now, X, ws.settings)
    keep = training_rows(view, params, now, max_posts=ws.settings.train_max_posts)
    return view, keep, X, y, times
