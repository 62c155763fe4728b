"""Forecasts of a draft's metric: the path from store to response.

    store -> history view (service.history.view) -> neighbours (service.history.retrieval)
    -> features (models.features) -> StackedForecaster: candidates blended in
    time order + CQR on the blend (models.stacking) -> interval, adapted by the
    track record's calibration (service.forecast.calibration), precedents,
    near-repeats (service.history.repeats) and grouped contributions (models.explain)

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

from models import features as F
from models.artefact import TrainedModel, newest
from models.errors import InputError, NotReady
from models.explain import describe, group_contributions
from models.metrics import DEFAULT_COVERAGE, DEFAULT_METRIC, check_coverage, check_target
from service.clock import now_utc, zone
from service.forecast.answer import Contributions, Forecast, GroupEffect, from_model_scale
from service.forecast.calibration import CalibrationSource, adapted_band
from service.forecast.draft import Draft
from service.forecast.shared_columns import GROUPS, SharedTerms, view_tokens
from service.history import viewcache
from service.history.match_modes import Match
from service.history.peers import peer_repeats
from service.history.precedents import WeightedPrecedent, precedents_for
from service.history.repeats import near_repeats_many
from service.history.retrieval import Retriever, WideCache
from service.history.view import HistoryView, build_view
from service.limits import Limits
from service.settings import Settings
from service.storage.store import Store

#: Feature rows already made in one call: (vector bytes, account, cut-off, form) ->
#: (row, precedents' weights, precedents to show).
SameCache = dict[
    tuple[bytes, int, float, tuple[float, ...]], tuple[np.ndarray, dict[int, float], list[tuple[int, float]]]
]


@dataclass(frozen=True, slots=True)
class DraftBand:
    """A draft's interval without its explanations (``Forecaster.bands``)."""

    log: tuple[float, float, float]
    low: float
    median: float
    high: float
    warnings: list[str]
    backtested_coverage: float | None
    model_version: str


@dataclass(frozen=True, slots=True)
class _Run:
    """What one forecast run made, before the answers are written."""

    model: TrainedModel
    view: HistoryView
    now: datetime
    rows: list[tuple[np.ndarray, dict[int, float], str, list[tuple[int, float]]]]
    plans: list[datetime]
    X: np.ndarray
    bands: list[tuple[float, float, float]]
    infos: list[Any]
    repeats: list[Any]
    facts: Any

    def warnings(self, i: int) -> list[str]:
        return [r.message for r in self.repeats[i]] + (self.facts.warnings if self.facts else [])


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
        self._peers: dict[str, tuple[int, HistoryView | None]] = {}
        self._shared: dict[str, tuple[HistoryView, SharedTerms]] = {}
        #: Keep each view between processes (service.history.viewcache): a cold command
        #: maps it instead of building it. A service keeps its views in memory with
        #: their posts' details, so a forecast asks the store nothing but the counters.
        self.keep_views = True
        self._lock = threading.Lock()

    def embed(self, texts: Sequence[str]) -> np.ndarray:
        """Drafts' vectors, after the request limits; each distinct text is
        embedded once (a plan file or a comparison may repeat one)."""
        self.limits.check_drafts(texts)
        distinct = list(dict.fromkeys(texts))
        vecs = self._encode(distinct)
        if len(distinct) == len(texts):
            return vecs
        at = {t: i for i, t in enumerate(distinct)}
        return vecs[[at[t] for t in texts]]

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
        # Kept between processes (service.history.viewcache): a cold command maps it.
        v = viewcache.load(self.settings, self.store, metric, stamp) if self.keep_views else None
        if v is None:
            v = build_view(self.store, metric, with_vectors=False)
            if self.keep_views:
                viewcache.save(self.settings, v, stamp)
        with self._lock:
            self._views[metric] = (stamp, v)
        return v

    def history_posts(self, view: HistoryView, account: str) -> int:
        """Posts of ``account`` that have the view's metric: a forecast needs
        at least ``min_history_posts`` of them."""
        code = view.account_codes.get(account)
        return 0 if code is None else len(view.history.settled_rows(code)[0])

    def peers(self, metric: str) -> HistoryView | None:
        """The reference accounts' posts (service.history.peers), kept until
        the store's change counter moves; None when the store has none (asked
        in one query, so a team without peers never builds their view)."""
        stamp = self.store.stamp()
        with self._lock:
            hit = self._peers.get(metric)
            if hit is not None and hit[0] == stamp:
                return hit[1]
        v = (
            build_view(self.store, metric, with_vectors=False, reference=True)
            if self.store.reference_handles()
            else None
        )
        with self._lock:
            self._peers[metric] = (stamp, v)
        return v

    def shared_terms(self, view: HistoryView, kind: str) -> SharedTerms:
        """The history's key terms of ``kind`` for draft rows, kept with the view."""
        with self._lock:
            hit = self._shared.get(kind)
        if hit is not None and hit[0] is view:
            return hit[1]
        made = SharedTerms.of(view, view_tokens(view, self.store), kind)
        with self._lock:
            self._shared[kind] = (view, made)
        return made

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
        calibration: CalibrationSource | None = None,
        match: Match = Match.MEANING,
    ) -> list[Forecast]:
        """Forecast each draft, whole: ``vectors`` may pass embeddings already
        made; with ``calibration`` (the track record), each band is adapted to
        the outcomes scored so far and carries the live coverage and warnings;
        ``match`` says how near-repeats are found (``service.history.repeats``)."""
        run = self._run(drafts, metric, coverage, now, vectors, calibration, match)
        model, view = run.model, run.view
        # Shown precedents' details come from the view, as current as its stamp: no SQL.
        details = view.details(sorted({r for row in run.rows for r, _ in row[3]}))
        contribs = model.forecaster.contributions(run.X)
        team = len(view.account_codes) > 1  # "the team's usual" needs a team
        shown: dict[int, list[WeightedPrecedent]] = {}  # drafts sharing a neighbourhood share them
        out = []
        for i, d in enumerate(drafts):
            _, weights, tz, hood_rows = run.rows[i]
            band = run.bands[i]
            expected, groups = group_contributions(contribs[i], model.forecaster.feature_names_, GROUPS)
            local = run.plans[i].astimezone(zone(tz))
            if id(hood_rows) not in shown:
                shown[id(hood_rows)] = self._precedents(view, hood_rows, weights, run.now, details)
            out.append(
                Forecast(
                    metric=metric,
                    account=d.account,
                    planned_at=run.plans[i],
                    local_time=local.isoformat(timespec="minutes"),
                    low=from_model_scale(band[0], metric),
                    median=from_model_scale(band[1], metric),
                    high=from_model_scale(band[2], metric),
                    coverage=coverage,
                    backtested_coverage=model.backtested_at(coverage),
                    model_version=model.version,
                    precedents=shown[id(hood_rows)],
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
                            for e in (describe(g, groups[g], team=team) for g in F.GROUPS)
                        ],
                    ),
                    draft_id=d.draft_id,
                    log=band,
                    # Near-repeats of recent posts (own account and teammates), in every forecast.
                    warnings=run.warnings(i),
                    calibration=run.infos[i],
                    live_coverage=None if run.facts is None else run.facts.live.model_copy(),
                    repeats=run.repeats[i],
                    note=model.report.get("note"),
                )
            )
        return out

    def bands(
        self,
        drafts: list[Draft],
        *,
        metric: str = DEFAULT_METRIC,
        coverage: float = DEFAULT_COVERAGE,
        now: datetime | None = None,
        vectors: np.ndarray | None = None,
        match: Match = Match.MEANING,
    ) -> list[DraftBand]:
        """Only the intervals (log scale and counts) and warnings of
        :meth:`forecast`, from the same run, without the explanations (the
        precedents shown and TreeSHAP contributions): what a choice among
        many slots needs."""
        run = self._run(drafts, metric, coverage, now, vectors, None, match)
        return [
            DraftBand(
                log=b,
                low=from_model_scale(b[0], metric),
                median=from_model_scale(b[1], metric),
                high=from_model_scale(b[2], metric),
                warnings=run.warnings(i),
                backtested_coverage=run.model.backtested_at(coverage),
                model_version=run.model.version,
            )
            for i, b in enumerate(run.bands)
        ]

    def _run(
        self,
        drafts: list[Draft],
        metric: str,
        coverage: float,
        now: datetime | None,
        vectors: np.ndarray | None,
        calibration: CalibrationSource | None,
        match: Match = Match.MEANING,
    ) -> _Run:
        """The one forecast path: features, the model's bands (adapted by the
        calibration source), near-repeats."""
        check_coverage(coverage)
        model = self.model(metric)
        view = self.view(metric)
        now = now or now_utc()
        least = self.settings.min_history_posts
        for d in drafts:
            if d.account not in view.account_codes and self.store.account(d.account).reference:
                # (store.account raises NotFound for unknown accounts)
                raise InputError(
                    f"{d.account} is a reference account: its posts are searched, never forecast",
                    field="account",
                    value=d.account,
                    hint="choose one of the team's accounts (`sounding accounts`)",
                )
            n = self.history_posts(view, d.account)
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
        same: SameCache = {}  # one neighbourhood per distinct text, account and cut-off
        for d, vec in zip(drafts, vecs, strict=True):
            rows.append(self.features(view, model.features, d, vec, now, wide, same))
            plans.append(d.planned_at or now)
        X = model.rows(
            np.vstack([r[0] for r in rows]), vecs, [view.account_codes[d.account] for d in drafts]
        )  # extra columns
        kind = model.report.get("shared_terms")
        if kind:  # kept by training's backtest (service.forecast.shared_columns)
            cut_offs = [min(p, now).timestamp() for p in plans]
            shared = self.shared_terms(view, str(kind)).drafts(
                [d.text for d in drafts], cut_offs, model.features
            )
            X = np.hstack([X, shared])
        lo, med, hi = model.forecaster.predict(X, coverage=coverage)
        repeats = near_repeats_many(
            self.retrieval,
            self.settings,
            view,
            [(d.account, v, p) for d, v, p in zip(drafts, vecs, plans, strict=True)],
            now=now,
            wide=wide,
            texts=[d.text for d in drafts],
            match=match,
        )
        peers = self.peers(metric)
        if peers is not None and len(peers.history):
            for mine, theirs in zip(
                repeats,
                peer_repeats(
                    self.retrieval,
                    self.settings,
                    peers,
                    list(zip(vecs, plans, strict=True)),
                    metric=metric,
                    now=now,
                ),
                strict=True,
            ):
                mine.extend(theirs)
        facts = None if calibration is None else calibration.facts(model)
        bands, infos = [], []
        for i in range(len(drafts)):
            band = (float(lo[i]), float(med[i]), float(hi[i]))
            info = None
            if facts is not None:
                band, info = adapted_band(
                    band, model, coverage, facts.state, min_real=self.settings.adaptive_min_scored
                )
            bands.append(band)
            infos.append(info)
        return _Run(model, view, now, rows, plans, X, bands, infos, repeats, facts)

    def features(
        self,
        view: HistoryView,
        params: F.FeatureParams,
        d: Draft,
        vec: np.ndarray,
        now: datetime,
        wide: WideCache | None = None,
        same: SameCache | None = None,
    ) -> tuple[np.ndarray, dict[int, float], str, list[tuple[int, float]]]:
        """A draft's feature row, its precedents' weights, its account's zone
        and the precedents to show (History row, similarity), best first.

        Drafts of one text for one account planned after ``now`` (the slots of
        a day or week) all see what is settled now: with ``same``, they share
        one neighbourhood and differ only in their timing columns."""
        h = view.history
        planned = d.planned_at or now
        # Only what is settled now is known, even for a post planned later.
        t = min(planned, now).timestamp()
        code = view.account_codes[d.account]
        tz = view.zones[code]
        local = planned.astimezone(zone(tz))
        form = F.text_form(d.text, F.has_link(d.text), d.has_media)
        key = (vec.tobytes(), code, t, tuple(form))
        if same is not None and key in same:
            x0, weights0, shown0 = same[key]
            x = F.with_timing(x0, local_hour=local.hour + local.minute / 60.0, weekday=local.weekday())
            return x.reshape(1, -1), weights0, tz, shown0
        wide = {} if wide is None else wide
        hood = self.retrieval.neighbourhood(view, vec, t=t, account=code, params=params, cache=wide)
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
        if same is not None:
            same[key] = (x, weights, shown)
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
