"""Forecasts of a draft's metric: the path from store to response.

    store -> history view (service.history) -> neighbours (service.retrieval)
    -> features (models.features) -> StackedForecaster: candidates blended in
    time order + CQR on the blend (models.stacking) -> interval, precedents,
    near-repeats (service.repeats) and grouped contributions (models.explain)

Training and forecasting take neighbours by the same rule and call the same
``models.features.assemble``, so a draft is described exactly as the
training posts were.
"""

from __future__ import annotations

import threading
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any

import numpy as np
from pydantic import BaseModel, Field

from models import features as F
from models.artefact import TrainedModel, newest
from models.backtest import run_backtest
from models.errors import NotReady
from models.explain import describe, group_contributions
from models.metrics import (
    DEFAULT_COVERAGE,
    DEFAULT_METRIC,
    Metric,
    check_coverage,
    check_target,
    from_log,
)
from models.stacking import ALL_FEATURES, ALL_GROUPS, STACK_PARAMS, StackedForecaster, extra_columns
from service.answers import Calibration, Coverage, Instant, LiveCoverage
from service.datadir import DataDir
from service.history import HistoryView, build_view, feature_params, local_clock
from service.limits import Limits
from service.precedents import WeightedPrecedent, precedents_for
from service.repeats import Repeat, near_repeats_many
from service.retrieval import Retriever, WideCache
from service.settings import Settings
from service.store import Store, has_link
from service.timeparse import now_utc, wall_clock, zone

__all__ = [
    "CAUTION",
    "Contributions",
    "Draft",
    "Forecast",
    "Forecaster",
    "Forecasts",
    "GroupEffect",
    "HistoryView",
    "backtest",
    "build_view",
    "feature_params",
    "local_clock",
    "train",
    "training_set",
]

CAUTION = (
    "An estimate from this team's own history, not a certainty: the interval "
    "is calibrated to the stated coverage, and the backtest says how often "
    "such intervals held on past posts."
)


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
    data directory's one writer (service.locking)."""
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
        raise NotReady(
            f"{len(y)} mature posts with {metric}; training needs at least {MIN_TRAINING_POSTS}",
            hint="import more history",
        )
    # The text model's time-ordered column and the account code (models.stacking).
    X, text = _with_extra(view, params, now, X, ws.settings)
    order = np.argsort(times, kind="stable")
    X, y, times = X[order], y[order], times[order]
    # The calibration block comes after the training block in time.
    cut = round(len(y) * (1 - cal_fraction))
    model = StackedForecaster(**STACK_PARAMS).fit(
        X[:cut], y[:cut], X[cut:], y[cut:], feature_names=ALL_FEATURES, cal_times=times[cut:]
    )
    report: dict[str, Any] = {
        "metric": metric,
        "trained_at": now_utc().isoformat(),
        "data_as_of": now.isoformat(),
        "n_posts": len(y),
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
    }
    if backtest:
        report["backtest"] = run_backtest(X, y, times, feature_names=ALL_FEATURES, params=STACK_PARAMS)
        report["note"] = report["backtest"]["note"]
    # Versions sort by the wall clock of training, whatever "now" the data was seen at.
    stamp = wall_clock()  # not SOUNDING_NOW: versions must stay unique (issue 11)
    version = stamp.strftime("%Y%m%dT%H%M%S") + f"{stamp.microsecond // 1000:03d}Z"
    trained = TrainedModel(
        metric=metric, version=version, features=params, quantiles=model, report=report, text=text
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
    check_target(metric)
    params = feature_params(ws.settings)
    view = build_view(ws.store, metric, with_vectors=True)
    now = now or now_utc()
    X, y, times = training_set(view, params, now, **scale_options(ws.settings))
    if len(y) < MIN_TRAINING_POSTS:
        raise NotReady(f"{len(y)} mature posts with {metric}; a backtest needs {MIN_TRAINING_POSTS}")
    X, _ = _with_extra(view, params, now, X, ws.settings)
    return run_backtest(
        X, y, times, feature_names=ALL_FEATURES, coverage_level=coverage, n_folds=n_folds, params=STACK_PARAMS
    )


def _with_extra(
    view: HistoryView, params: F.FeatureParams, now: datetime, X: np.ndarray, settings: Settings
) -> tuple[np.ndarray, Any]:
    """``X`` (rows of ``training_set``) with models.stacking's extra columns."""
    extra, text = extra_columns(view.history, maturity_s=params.maturity_s, now=now.timestamp())
    keep = training_rows(view, params, now, max_posts=settings.train_max_posts)
    return np.hstack([X, extra[keep]]), text


@dataclass(slots=True)
class Draft:
    text: str
    account: str
    planned_at: datetime | None = None  # aware; None means now
    draft_id: str | None = None
    has_media: bool = False  # an image or video attached, as the has_media column of posts


class GroupEffect(BaseModel):
    """One group of features' share of a forecast (models.explain)."""

    group: str
    log_contribution: float
    factor: float = Field(description="Multiplicative effect on (1 + metric)")
    summary: str


class Contributions(BaseModel):
    """What moved a forecast away from the model's expected value, by group."""

    scale: str = "log1p; factors multiply (1 + metric)"
    expected_log: float
    predicted_log: float
    groups: list[GroupEffect]


class Forecast(BaseModel):
    """A draft's forecast: an interval with its stated and backtested coverage."""

    draft_id: str | None = None
    metric: Metric
    account: str
    planned_at: Instant
    local_time: str = Field(description="The planned time in the account's zone, with its offset")
    low: float
    median: float
    high: float
    coverage: Coverage = Field(description="Nominal coverage of [low, high]")
    backtested_coverage: float | None = Field(
        description="How often intervals of this level held in time-ordered backtests"
    )
    model_version: str
    precedents: list[WeightedPrecedent]
    contributions: Contributions
    warnings: list[str] = Field(default_factory=list)
    caution: str = CAUTION
    repeats: list[Repeat] = Field(
        default_factory=list, description="Near-repeats behind the warnings, most similar first"
    )
    # Track record (issue 11): set by service.track_record.give.
    calibration: Calibration | None = None
    live_coverage: LiveCoverage | None = None
    note: str | None = Field(
        default=None,
        description="One plain line from the backtest when the history's text "
        "carries little signal (what the forecast leans on instead)",
    )
    #: low, median and high on the model's log1p scale (kept for ranking and adaptation).
    log: tuple[float, float, float] = Field(default=(0.0, 0.0, 0.0), exclude=True)


class Forecasts(BaseModel):
    """Forecasts of several drafts, in the order given."""

    forecasts: list[Forecast]


class Forecaster:
    """Serves forecasts from the newest trained model of each metric.

    The newest version is looked up on each call (a directory listing) and
    swapped in under a lock, so a request uses one whole model throughout.
    """

    def __init__(
        self,
        *,
        store: Store,
        settings: Settings,
        retrieval: Retriever,
        encode: Callable[[list[str]], np.ndarray],
    ) -> None:
        self.store = store
        self.settings = settings
        self.retrieval = retrieval
        self.limits = Limits.from_settings(settings)
        self._encode = encode
        self._models: dict[str, TrainedModel] = {}
        self._views: dict[str, tuple[int, HistoryView]] = {}
        self._lock = threading.Lock()

    def embed(self, texts: Sequence[str]) -> np.ndarray:
        """Drafts' vectors, after the request limits."""
        self.limits.check_drafts(texts)
        return self._encode(list(texts))

    def model(self, metric: str) -> TrainedModel:
        check_target(metric)
        version = newest(self.settings.models_dir, metric)
        with self._lock:
            current = self._models.get(metric)
            if current is None or current.version != version:
                current = TrainedModel.load(self.settings.models_dir / metric / version)
                self._models[metric] = current
            return current

    def view(self, metric: str) -> HistoryView:
        stamp = self.store.stamp()
        with self._lock:
            hit = self._views.get(metric)
            if hit is not None and hit[0] == stamp:
                return hit[1]
        v = build_view(self.store, metric, with_vectors=False)
        with self._lock:
            self._views[metric] = (stamp, v)
        return v

    def warm(self) -> None:
        """Rebuild, ahead of the next forecast, the history views already in
        use whose store changed (the service's background refresher calls
        this): the first forecast after an import then finds its view ready."""
        with self._lock:
            metrics = list(self._views)
        for metric in metrics:
            self.view(metric)

    def forecast(
        self,
        drafts: list[Draft],
        *,
        metric: str = DEFAULT_METRIC,
        coverage: float = DEFAULT_COVERAGE,
        now: datetime | None = None,
        vectors: np.ndarray | None = None,
        model: TrainedModel | None = None,
    ) -> list[Forecast]:
        """Forecast each draft; ``vectors`` may pass embeddings already made,
        ``model`` the model already looked up for this answer."""
        check_coverage(coverage)
        model = model or self.model(metric)
        view = self.view(metric)
        now = now or now_utc()
        least = self.settings.min_history_posts
        for d in drafts:
            code = view.account_codes.get(d.account)
            if code is None:
                self.store.account(d.account)  # raises NotFound for unknown accounts
            n = 0 if code is None else len(view.history.settled_rows(code)[0])
            if n < least:
                raise NotReady(
                    f"account {d.account!r} has {n} posts with {metric}; a forecast needs at "
                    f"least {least} (SOUNDING_MIN_HISTORY_POSTS)",
                    field="account",
                    value=d.account,
                )
        vecs = vectors if vectors is not None else self.embed([d.text for d in drafts])
        rows, plans = [], []
        wide: WideCache = {}  # one search per distinct text
        for d, vec in zip(drafts, vecs, strict=True):
            rows.append(self.features(view, model.features, d, vec, now, wide))
            plans.append(d.planned_at or now)
        # Shown precedents' details come from the view, as current as its stamp: no SQL.
        details = view.details(sorted({r for row in rows for r, _ in row[3]}))
        X = model.rows(
            np.vstack([r[0] for r in rows]), vecs, [view.account_codes[d.account] for d in drafts]
        )  # issue 10: extra columns
        lo, med, hi = model.quantiles.predict(X, coverage=coverage)
        contribs = model.quantiles.contributions(X)
        repeats = near_repeats_many(
            self.retrieval,
            self.settings,
            view,
            [(d.account, v, p) for d, v, p in zip(drafts, vecs, plans, strict=True)],
            now=now,
            wide=wide,
        )
        out = []
        for i, d in enumerate(drafts):
            _, weights, tz, hood_rows = rows[i]
            expected, groups = group_contributions(contribs[i], model.quantiles.feature_names_, ALL_GROUPS)
            local = plans[i].astimezone(zone(tz))
            out.append(
                Forecast(
                    metric=metric,
                    account=d.account,
                    planned_at=plans[i],
                    local_time=local.isoformat(timespec="minutes"),
                    low=_back(lo[i], metric),
                    median=_back(med[i], metric),
                    high=_back(hi[i], metric),
                    coverage=coverage,
                    backtested_coverage=model.backtested_at(coverage),
                    model_version=model.version,
                    precedents=self._precedents(view, hood_rows, weights, now, details),
                    contributions=Contributions(
                        expected_log=expected,
                        predicted_log=float(expected + sum(groups.values())),
                        groups=[
                            GroupEffect(
                                group=e.group,
                                log_contribution=e.log_contribution,
                                factor=e.factor,
                                summary=e.summary,
                            )
                            for e in (describe(g, groups[g]) for g in F.GROUPS)
                        ],
                    ),
                    draft_id=d.draft_id,
                    log=(float(lo[i]), float(med[i]), float(hi[i])),
                    # Near-repeats of recent posts (own account and teammates), in every forecast.
                    warnings=[r.message for r in repeats[i]],
                    repeats=repeats[i],
                    note=model.report.get("note"),
                )
            )
        return out

    def features(
        self,
        view: HistoryView,
        params: F.FeatureParams,
        d: Draft,
        vec: np.ndarray,
        now: datetime,
        wide: WideCache | None = None,
    ) -> tuple[np.ndarray, dict[int, float], str, list[tuple[int, float]]]:
        """A draft's feature row, its precedents' weights, its account's zone
        and the precedents to show (History row, similarity), best first."""
        h = view.history
        planned = d.planned_at or now
        # Only what is settled now is known, even for a post planned later.
        t = min(planned, now).timestamp()
        code = view.account_codes[d.account]
        wide = {} if wide is None else wide
        hood = self.retrieval.neighbourhood(view, vec, t=t, account=code, params=params, cache=wide)
        tz = view.zones[code]
        local = planned.astimezone(zone(tz))
        form = F.text_form(d.text, has_link(d.text), d.has_media)
        x, weights = F.assemble(
            h,
            hood,
            t=t,
            account=code,
            local_hour=local.hour + local.minute / 60.0,
            weekday=local.weekday(),
            form=form,
            params=params,
        )
        shown = [(int(r), float(s)) for r, s in zip(hood.team, hood.team_sims, strict=True)]
        # Young posts are shown (flagged) but never used: their metrics have not settled.
        rows, sims = self.retrieval.wide(view, vec, params, wide)
        young = (h.time[rows] > t - params.maturity_s) & (h.time[rows] <= t)
        shown += [
            (int(r), float(s))
            for r, s in zip(rows[young][:5], sims[young][:5], strict=True)
            if s >= params.similar_threshold
        ]
        shown.sort(key=lambda p: -p[1])
        return x.reshape(1, -1), weights, tz, shown

    def _precedents(
        self,
        view: HistoryView,
        shown: list[tuple[int, float]],
        weights: dict[int, float],
        now: datetime,
        details: dict[int, dict[str, Any]],
    ) -> list[WeightedPrecedent]:
        pks = [int(view.history.pk[r]) for r, _ in shown]
        found = {
            p.pk: p
            for p in precedents_for(
                self.store,
                [(pk, s) for pk, (_, s) in zip(pks, shown, strict=True)],
                maturity_hours=self.settings.maturity_hours,
                now=now,
                details=details,
            )
        }
        out = []
        for (row, _), pk in zip(shown, pks, strict=True):
            p = found.get(pk)
            if p is None:
                continue
            out.append(WeightedPrecedent(**dict(p), weight=weights.get(row, 0.0)))
        return out


def _back(value: float, metric: str) -> float:
    v = float(from_log(value))
    v = max(v, 0.0)
    return round(v, 5) if metric == Metric.ENGAGEMENT_RATE else round(v, 1)
