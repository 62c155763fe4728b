"""Forecasts of a draft's metric: the path from store to response.

    store -> History (arrays) -> features (models.features) ->
    QuantileForecaster + CQR (models.regressor) -> interval, precedents and
    grouped TreeSHAP contributions (models.explain)

Training and forecasting call the same ``models.features.assemble``, so a
draft is described exactly as the training posts were.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any

import numpy as np
import pandas as pd

from models import features as F
from models.artefact import TrainedModel, newest
from models.backtest import run_backtest
from models.errors import InputError, NotReady
from models.explain import describe, group_contributions
from models.metrics import METRIC_COLUMNS, check_target, from_log, target_value
from models.regressor import QuantileForecaster

from .store import has_link
from .timeparse import now_utc, zone

CAUTION = (
    "An estimate from this team's own history, not a certainty: the interval "
    "is calibrated to the stated coverage, and backtested_coverage says how "
    "often such intervals held on past posts."
)


@dataclass(slots=True)
class HistoryView:
    """The store's posts as arrays for one metric, oldest first."""

    metric: str
    frame: pd.DataFrame
    history: F.History
    local_hours: np.ndarray
    weekdays: np.ndarray
    forms: np.ndarray
    account_codes: dict[str, int]
    row_of_pk: dict[int, int]
    zones: dict[int, str]  # account code -> IANA zone


def local_clock(times: pd.Series, zones: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Local hour (with minutes as a fraction) and weekday in each post's zone."""
    hours = np.zeros(len(times))
    days = np.zeros(len(times), dtype=np.int64)
    for tz in zones.unique():
        mask = (zones == tz).to_numpy()
        local = times[mask].dt.tz_convert(str(tz))
        hours[mask] = (local.dt.hour + local.dt.minute / 60.0).to_numpy()
        days[mask] = local.dt.day_of_week.to_numpy()
    return hours, days


def build_view(store: Any, metric: str, *, with_vectors: bool) -> HistoryView:
    frame = store.posts_frame()
    values = [target_value(r, metric) for r in frame[list(METRIC_COLUMNS)].to_dict("records")]
    logs = np.log1p(np.array([np.nan if v is None else v for v in values], dtype=np.float64))
    codes = {h: i for i, h in enumerate(sorted(frame["account"].unique()))}
    vecs = (store.vectors(list(frame["vector_key"])) if with_vectors and len(frame)
            else np.zeros((len(frame), 0), dtype=np.float32))
    history = F.History(
        pk=frame["pk"].to_numpy(np.int64),
        # Seconds since the epoch, whatever resolution pandas chose for datetimes.
        time=(frame["posted_at"] - pd.Timestamp(0, tz="UTC")).dt.total_seconds().to_numpy(np.float64),
        account=frame["account"].map(codes).to_numpy(np.int64),
        log_target=logs,
        vectors=vecs,
    )
    hours, days = local_clock(frame["posted_at"], frame["timezone"])
    forms = np.array([F.text_form(t, bool(lk), bool(md)) for t, lk, md in zip(
        frame["text"], frame["has_link"], frame["has_media"], strict=True)]).reshape(len(frame), -1)
    zones = {codes[a]: str(z) for a, z in zip(frame["account"], frame["timezone"], strict=True)}
    return HistoryView(metric, frame, history, hours, days, forms, codes,
                       {int(p): i for i, p in enumerate(frame["pk"])}, zones)


def feature_params(settings: Any) -> F.FeatureParams:
    return F.FeatureParams(
        k=settings.neighbours, maturity_s=settings.maturity_hours * 3600.0,
        similar_threshold=settings.similar_threshold, baseline_n=settings.baseline_posts,
    )


def training_set(view: HistoryView, params: F.FeatureParams, now: datetime, *,
                 max_posts: int | None = None, approximate_above: int | None = None,
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Leak-free features, targets and times of every post mature by ``now``
    (only the ``max_posts`` most recent of them when set; their neighbours
    still come from the whole history)."""
    keep = np.flatnonzero(F.eligible(view.history, now.timestamp(), params))
    if max_posts is not None:
        keep = keep[-max_posts:]  # History is sorted by time
    X = F.training_matrix(view.history, local_hours=view.local_hours, weekdays=view.weekdays,
                          forms=view.forms, params=params, rows=keep,
                          approximate_above=approximate_above)
    return X, view.history.log_target[keep], view.history.time[keep]


def scale_options(settings: Any) -> dict[str, Any]:
    """The training-set options of issue 12's scale settings."""
    return {"max_posts": getattr(settings, "train_max_posts", None),
            "approximate_above": getattr(settings, "train_approximate_above", None)}


# One thread: LightGBM's OpenMP threads slow down badly when other work
# shares the cores (a service answering requests), and the trees are the same.
QUANTILE_PARAMS: dict[str, Any] = {"n_estimators": 200, "learning_rate": 0.06, "num_leaves": 15,
                                   "min_child_samples": 20, "num_threads": 1}
MIN_TRAINING_POSTS = 200
WIDE = 200  # nearest posts fetched per draft before filtering


def train(ws: Any, metric: str = "impressions", *, now: datetime | None = None,
          backtest: bool = True, cal_fraction: float = 0.2) -> TrainedModel:
    """Train, backtest and save a new model version for ``metric``."""
    check_target(metric)
    now = now or now_utc()
    params = feature_params(ws.settings)
    view = build_view(ws.store, metric, with_vectors=True)
    X, y, times = training_set(view, params, now, **scale_options(ws.settings))
    if len(y) < MIN_TRAINING_POSTS:
        raise NotReady(
            f"{len(y)} mature posts with {metric}; training needs at least {MIN_TRAINING_POSTS}",
            hint="import more history",
        )
    order = np.argsort(times, kind="stable")
    X, y, times = X[order], y[order], times[order]
    # The calibration block comes after the training block in time.
    cut = int(round(len(y) * (1 - cal_fraction)))
    model = QuantileForecaster(**QUANTILE_PARAMS).fit(
        X[:cut], y[:cut], X[cut:], y[cut:], feature_names=F.FEATURE_NAMES)
    report: dict[str, Any] = {
        "metric": metric,
        "trained_at": now_utc().isoformat(),
        "data_as_of": now.isoformat(),
        "n_posts": int(len(y)),
        "n_train": int(cut),
        "n_calibration": int(len(y) - cut),
        "train_until": datetime.fromtimestamp(times[cut - 1], tz=now.tzinfo).isoformat(),
        "features": {"k": params.k, "maturity_hours": params.maturity_s / 3600,
                     "similar_threshold": params.similar_threshold,
                     "baseline_posts": params.baseline_n},
    }
    if backtest:
        report["backtest"] = run_backtest(X, y, times, feature_names=F.FEATURE_NAMES,
                                          params=QUANTILE_PARAMS)
    # Versions sort by the wall clock of training, whatever "now" the data was seen at.
    stamp = now_utc()
    version = stamp.strftime("%Y%m%dT%H%M%S") + f"{stamp.microsecond // 1000:03d}Z"
    trained = TrainedModel(metric=metric, version=version, features=params,
                           quantiles=model, report=report)
    trained.save(ws.settings.models_dir)
    return trained


def backtest(ws: Any, metric: str = "impressions", *, coverage: float = 0.8,
             n_folds: int = 4, now: datetime | None = None) -> dict[str, Any]:
    check_target(metric)
    params = feature_params(ws.settings)
    view = build_view(ws.store, metric, with_vectors=True)
    X, y, times = training_set(view, params, now or now_utc(), **scale_options(ws.settings))
    if len(y) < MIN_TRAINING_POSTS:
        raise NotReady(f"{len(y)} mature posts with {metric}; a backtest needs {MIN_TRAINING_POSTS}")
    return run_backtest(X, y, times, feature_names=F.FEATURE_NAMES, coverage_level=coverage,
                        n_folds=n_folds, params=QUANTILE_PARAMS)


@dataclass(slots=True)
class Draft:
    text: str
    account: str
    planned_at: datetime | None = None  # aware; None means now
    draft_id: str | None = None


@dataclass(slots=True)
class Forecast:
    metric: str
    account: str
    planned_at: datetime
    local_time: str
    low: float
    median: float
    high: float
    coverage: float
    backtested_coverage: float | None
    model_version: str
    precedents: list[dict[str, Any]]
    contributions: dict[str, Any]
    warnings: list[str] = field(default_factory=list)
    draft_id: str | None = None
    log: tuple[float, float, float] = (0.0, 0.0, 0.0)
    repeats: list[dict[str, Any]] = field(default_factory=list)  # service.review.Repeat dicts

    def to_dict(self) -> dict[str, Any]:
        return {
            "draft_id": self.draft_id, "metric": self.metric, "account": self.account,
            "planned_at": self.planned_at.isoformat(), "local_time": self.local_time,
            "low": self.low, "median": self.median, "high": self.high,
            "coverage": self.coverage, "backtested_coverage": self.backtested_coverage,
            "model_version": self.model_version, "precedents": self.precedents,
            "contributions": self.contributions, "warnings": self.warnings, "caution": CAUTION,
            "repeats": self.repeats,
        }


class Forecaster:
    """Serves forecasts from the newest trained model of each metric.

    The newest version is looked up on each call (a directory listing) and
    swapped in under a lock, so a request uses one whole model throughout.
    """

    def __init__(self, *, workspace: Any) -> None:
        self.ws = workspace
        self._models: dict[str, TrainedModel] = {}
        self._views: dict[str, tuple[Any, HistoryView]] = {}
        self._lock = threading.Lock()

    def model(self, metric: str) -> TrainedModel:
        check_target(metric)
        version = newest(self.ws.settings.models_dir, metric)
        with self._lock:
            current = self._models.get(metric)
            if current is None or current.version != version:
                current = TrainedModel.load(self.ws.settings.models_dir / metric / version)
                self._models[metric] = current
            return current

    def view(self, metric: str) -> HistoryView:
        stamp = self.ws.store.stamp()
        with self._lock:
            hit = self._views.get(metric)
            if hit is not None and hit[0] == stamp:
                return hit[1]
        v = build_view(self.ws.store, metric, with_vectors=False)
        with self._lock:
            self._views[metric] = (stamp, v)
        return v

    def forecast(self, drafts: list[Draft], *, metric: str = "impressions",
                 coverage: float = 0.8, now: datetime | None = None,
                 vectors: np.ndarray | None = None) -> list[Forecast]:
        """Forecast each draft; ``vectors`` may pass embeddings already made."""
        if not 0.5 <= coverage <= 0.95:
            raise InputError(f"coverage must be between 0.5 and 0.95, got {coverage}",
                             field="coverage", value=coverage)
        model = self.model(metric)
        view = self.view(metric)
        now = now or now_utc()
        least = self.ws.settings.min_history_posts
        for d in drafts:
            code = view.account_codes.get(d.account)
            if code is None:
                self.ws.store.account(d.account)  # raises NotFound for unknown accounts
            n = 0 if code is None else int(np.sum(
                (view.history.account == code) & ~np.isnan(view.history.log_target)))
            if n < least:
                raise NotReady(
                    f"account {d.account!r} has {n} posts with {metric}; a forecast needs at "
                    f"least {least} (SOUNDING_MIN_HISTORY_POSTS)", field="account", value=d.account)
        vecs = vectors if vectors is not None else self.ws.embed_drafts([d.text for d in drafts])
        rows, plans = [], []
        wide: dict[bytes, tuple[np.ndarray, np.ndarray]] = {}  # one search per distinct text
        for d, vec in zip(drafts, vecs, strict=True):
            rows.append(self._features(view, model.features, d, vec, now, wide))
            plans.append(d.planned_at or now)
        details = self.ws.store.posts_by_pk(sorted({int(view.history.pk[r]) for row in rows
                                                    for r, _ in row[3]}))
        X = np.vstack([r[0] for r in rows])
        lo, med, hi = model.quantiles.predict(X, coverage=coverage)
        contribs = model.quantiles.contributions(X)
        from .review import near_repeats_many  # imported here: service.review imports this module

        repeats = near_repeats_many(self.ws, view, [(d.account, v, p) for d, v, p in zip(
            drafts, vecs, plans, strict=True)], now=now, wide=wide)
        out = []
        for i, d in enumerate(drafts):
            _, weights, tz, hood_rows = rows[i]
            expected, groups = group_contributions(contribs[i], model.quantiles.feature_names_,
                                                   F.FEATURE_GROUPS)
            local = plans[i].astimezone(zone(tz))
            out.append(Forecast(
                metric=metric, account=d.account, planned_at=plans[i],
                local_time=local.isoformat(timespec="minutes"),
                low=_back(lo[i], metric), median=_back(med[i], metric), high=_back(hi[i], metric),
                coverage=coverage, backtested_coverage=model.backtested_at(coverage),
                model_version=model.version,
                precedents=self._precedents(view, hood_rows, weights, now, details),
                contributions={
                    "scale": "log1p; factors multiply (1 + metric)",
                    "expected_log": expected,
                    "predicted_log": float(expected + sum(groups.values())),
                    "groups": [
                        {"group": e.group, "log_contribution": e.log_contribution,
                         "factor": e.factor, "summary": e.summary}
                        for e in (describe(g, groups[g]) for g in F.GROUPS)
                    ],
                },
                draft_id=d.draft_id, log=(float(lo[i]), float(med[i]), float(hi[i])),
                # Near-repeats of recent posts (own account and teammates), in every forecast.
                warnings=[r.message for r in repeats[i]], repeats=[r.to_dict() for r in repeats[i]],
            ))
        return out

    def _features(self, view: HistoryView, params: F.FeatureParams, d: Draft, vec: np.ndarray,
                  now: datetime, wide: dict[bytes, tuple[np.ndarray, np.ndarray]] | None = None,
                  ) -> tuple[np.ndarray, dict[int, float], str, list[tuple[int, float]]]:
        h = view.history
        planned = d.planned_at or now
        # Only what is settled now is known, even for a post planned later.
        t = min(planned, now).timestamp()
        code = view.account_codes[d.account]
        ok = F.eligible(h, t, params)
        own_ok = ok & (h.account == code)
        # One wide, unfiltered search serves the team, own-account and young
        # lists; a filtered search is only needed when the account's posts
        # are too rare among the nearest to fill its list.
        key = np.asarray(vec, dtype=np.float32).tobytes()
        if wide is None or key not in wide:
            found = self._search(view, vec, None, min(len(h), max(WIDE, 10 * params.k)))
            if wide is None:
                wide = {}
            wide[key] = found
        rows, sims = wide[key]
        team = (rows[ok[rows]], sims[ok[rows]])
        own = (rows[own_ok[rows]], sims[own_ok[rows]])
        if len(own[0]) < min(params.k, int(own_ok.sum())):
            own = self._search(view, vec, h.pk[own_ok], params.k)
        if len(team[0]) < min(params.k, int(ok.sum())):
            team = self._search(view, vec, h.pk[ok], params.k)
        hood = F.draft_neighbourhood(h, team, own, t=t, params=params)
        tz = view.zones[code]
        local = planned.astimezone(zone(tz))
        form = F.text_form(d.text, has_link(d.text), False)
        x, weights = F.assemble(h, hood, t=t, account=code,
                                local_hour=local.hour + local.minute / 60.0,
                                weekday=local.weekday(), form=form, params=params)
        shown = [(int(r), float(s)) for r, s in zip(hood.team, hood.team_sims, strict=True)]
        young = (h.time[rows] > t - params.maturity_s) & (h.time[rows] <= t)
        shown += [(int(r), float(s)) for r, s in zip(rows[young][:5], sims[young][:5], strict=True)
                  if s >= params.similar_threshold]
        shown.sort(key=lambda p: -p[1])
        return x.reshape(1, -1), weights, tz, shown

    def _search(self, view: HistoryView, vec: np.ndarray, allowed_pks: np.ndarray | None, k: int
                ) -> tuple[np.ndarray, np.ndarray]:
        if allowed_pks is not None and len(allowed_pks) == 0 or k < 1:
            return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.float32)
        hits = self.ws.neighbours(vec.reshape(1, -1), k, allowed_pks=allowed_pks)[0]
        rows = [(view.row_of_pk[p], s) for p, s in hits if p in view.row_of_pk]
        return (np.array([r for r, _ in rows], dtype=np.int64),
                np.array([s for _, s in rows], dtype=np.float32))

    def _precedents(self, view: HistoryView, shown: list[tuple[int, float]],
                    weights: dict[int, float], now: datetime,
                    details: dict[int, dict[str, Any]]) -> list[dict[str, Any]]:
        pks = [int(view.history.pk[r]) for r, _ in shown]
        found = {p.pk: p for p in self.ws.precedents_for(
            [(pk, s) for pk, (_, s) in zip(pks, shown, strict=True)], now=now, details=details)}
        out = []
        for (row, _), pk in zip(shown, pks, strict=True):
            p = found.get(pk)
            if p is None:
                continue
            d = p.to_dict()
            d["weight"] = round(weights.get(row, 0.0), 4)
            out.append(d)
        return out


def _back(value: float, metric: str) -> float:
    v = float(from_log(value))
    v = max(v, 0.0)
    return round(v, 5) if metric == "engagement_rate" else round(v, 1)
