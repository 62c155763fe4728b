"""The track record: forecasts given, matched to what was posted, and scored.

    give   forecast drafts (check, a plan file, the API, the page), adapt the
           interval to the outcomes scored so far (models.adaptive), add the
           staleness warnings, and record each forecast;
    match  after every import, link each new post to the forecast it fulfils;
    score  once a matched post is settled, whether its outcome fell inside
           the interval, and the log error;
    adapt  feed new outcomes (or, while the record is short, newly settled
           posts forecast as they would have been: pseudo-outcomes) to the
           adaptive conformal state of each metric and coverage level;
    report per month and overall, against the simple forecasters.

Matching rules (DEVELOPERS.md, "Track record"): an explicit ``draft_id`` of
the import names the forecast; otherwise the same account, a draft-to-post
similarity at or above ``SOUNDING_MATCH_SIMILARITY`` and a posting time
within ``SOUNDING_MATCH_WINDOW_HOURS`` of the planned time. A post fulfils at
most one forecast of a metric (the latest given before it was posted; near
ties in similarity go to the latest), a forecast at most one post, and a
forecast given after the post went out never counts. Matches already made
stay, so matching again changes nothing (idempotent).
"""

from __future__ import annotations

import csv
import json
import math
import threading
import typing
import weakref
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
from pydantic import BaseModel, Field
from scipy.stats import binom
from sqlalchemy import Integer, cast, delete, func, select

from models import features as F
from models.adaptive import aci_step, adaptive_quantile
from models.artefact import TrainedModel, versions
from models.errors import InputError, NotReady, SoundingError
from models.metrics import (
    DEFAULT_COVERAGE,
    DEFAULT_METRIC,
    TARGETS,
    Metric,
    check_coverage,
    check_target,
    target_value,
    target_values,
)
from models.proportions import wilson_interval
from service.answers import Calibration, LiveCoverage
from service.forecasting import Draft, Forecast, _back
from service.tables import Account, CalibrationState, ForecastGiven, ForecastMatch, Post, PostDraftLink
from service.timeparse import as_utc, now_utc, parse_time, to_naive_utc

#: Near ties in similarity (same draft edited and checked again) go to the latest forecast.
SIMILARITY_TIE = 0.01
#: Scored forecasts behind the staleness check of live coverage.
RECENT_SCORED = 50
WORST = 5
BASELINES = ("account_median", "precedents_median")


def level_key(coverage: float) -> str:
    return f"{round(float(coverage), 2):g}"


def _at_level(coverage: float) -> Any:
    """Forecasts given at this coverage level (two decimals), as a portable
    range rather than round(), which PostgreSQL lacks for double precision."""
    c = round(float(coverage), 2)
    return ForecastGiven.coverage.between(c - 0.005, c + 0.005)


# Answers ---------------------------------------------------------------------


class BaselineScore(BaseModel):
    mae_log: float | None = Field(description="MAE on the log1p scale on the same settled posts")
    posts: int


class Baselines(BaseModel):
    account_median: BaselineScore = Field(
        description="The account's trailing median, as it stood when the forecast was given"
    )
    precedents_median: BaselineScore = Field(
        description="The median of the settled precedents shown with the forecast"
    )


class PeriodSummary(BaseModel):
    given: int = Field(description="Forecasts given")
    matched: int = Field(description="Forecasts matched to a published post")
    settled: int = Field(description="Matched forecasts whose post is settled, i.e. scored")
    stated_coverage: float | None
    live_coverage: float | None = Field(
        description="Share of settled forecasts whose outcome fell inside the interval"
    )
    live_coverage_ci: list[float] | None = Field(description="Wilson 95% interval [low, high]")
    mae_log: float | None
    baselines: Baselines


class MonthSummary(PeriodSummary):
    month: str = Field(description="YYYY-MM of when the forecasts were given (UTC)")


class PrecedentBrief(BaseModel):
    post_id: str
    account: str
    text: str
    similarity: float
    value: float | None


class Miss(BaseModel):
    forecast_id: int
    given_at: str
    draft_id: str | None
    account: str
    text: str
    planned_at: str
    post_id: str | None
    posted_at: str | None
    coverage: float
    low: float
    median: float
    high: float
    outcome: float | None
    error_log: float | None
    model_version: str
    calibration: str
    precedents: list[PrecedentBrief]


class CalibrationLevel(BaseModel):
    level: str
    alpha_t: float
    gamma: float
    outcomes: int
    pseudo_outcomes: int


class TrackPoint(BaseModel):
    given_at: str
    posted_at: str | None
    coverage: float
    low: float
    median: float
    high: float
    outcome: float | None
    inside: bool | None


class TrackRecord(BaseModel):
    """The track record of one metric (``GET /v1/track-record``, ``sounding track-record``)."""

    metric: Metric
    as_of: str
    filters: dict[str, str | None]
    overall: PeriodSummary
    months: list[MonthSummary]
    worst: list[Miss] = Field(description="The settled forecasts that missed worst (log error)")
    calibration: list[CalibrationLevel] = Field(description="Adaptive conformal state per level")
    points: list[TrackPoint]


# Giving ----------------------------------------------------------------------


def give(
    ws: Any,
    drafts: list[Draft],
    *,
    metric: str = DEFAULT_METRIC,
    coverage: float = DEFAULT_COVERAGE,
    record: bool = True,
    source: str = "check",
    now: datetime | None = None,
    vectors: np.ndarray | None = None,
) -> list[Forecast]:
    """Forecasts as sounding gives them: adapted, with live coverage and
    staleness warnings, and recorded unless ``record`` is False."""
    now = now or now_utc()
    check_coverage(coverage)  # before the model look-up, as forecast() orders its checks
    with ws.store.pinned():  # one read of the store's counters for the whole answer
        model = ws.forecaster.model(metric)
        found: list[Forecast] = ws.forecaster.forecast(
            drafts, metric=metric, coverage=coverage, now=now, vectors=vectors, model=model
        )
        scored = _scored(ws.store, metric, coverage)
        warnings = staleness(ws, metric, coverage, model=model, now=now)["warnings"]
        for f in found:
            _adapt_band(f, model, coverage, scored.state)
            f.live_coverage = scored.live.model_copy()
            f.warnings.extend(warnings)
        if record and found:
            _record(ws, drafts, found, model=model, source=source, now=now)
    return found


def _scores(model: TrainedModel, coverage: float) -> np.ndarray:
    """The model's sorted calibration scores at ``coverage`` (either forecaster)."""
    return model.quantiles.calibration_scores(coverage)


def _adapt_band(f: Forecast, model: TrainedModel, coverage: float, state: CalibrationState | None) -> None:
    """Widen or narrow the CQR band by the ACI level alpha_t (same median)."""
    alpha = 1.0 - coverage
    alpha_t = alpha if state is None else state.alpha_t
    info = Calibration(method="cqr", level=level_key(coverage), alpha=alpha, alpha_t=alpha_t)
    if state is not None and (state.real_updates or state.pseudo_updates):
        shift, capped = _shift(_scores(model, coverage), alpha, alpha_t)
        info = info.model_copy(
            update={
                "method": "cqr+aci",
                "outcomes": state.real_updates,
                "pseudo_outcomes": state.pseudo_updates,
                "gamma": state.gamma,
                "capped": capped,
            }
        )
        lo, med, hi = f.log
        lo, hi = min(lo - shift, med), max(hi + shift, med)
        f.log = (lo, med, hi)
        f.low, f.high = _back(lo, f.metric), _back(hi, f.metric)
    f.calibration = info


def _shift(sorted_scores: np.ndarray, alpha: float, alpha_t: float) -> tuple[float, bool]:
    """Extra widening of the band at alpha_t over the CQR band at alpha.

    ACI's whole-line band (alpha_t <= 0) and empty band (alpha_t >= 1) are
    capped at the largest and smallest calibration score, so an answer
    always carries finite numbers; ``capped`` says when that happened."""
    base = adaptive_quantile(sorted_scores, alpha)
    q = adaptive_quantile(sorted_scores, alpha_t)
    capped = not math.isfinite(q)
    if q == math.inf:
        q = float(sorted_scores[-1])
    elif q == -math.inf:
        q = float(sorted_scores[0])
    if not math.isfinite(base):
        base = float(sorted_scores[-1])
    return q - base, capped


def _record(
    ws: Any, drafts: list[Draft], found: list[Forecast], *, model: TrainedModel, source: str, now: datetime
) -> None:
    view = ws.forecaster.view(found[0].metric)
    ids = _account_ids(ws.store, {d.account for d in drafts})
    with ws.store.session() as s:
        for d, f in zip(drafts, found, strict=True):
            t = min(f.planned_at, now).timestamp()
            code = view.account_codes.get(d.account)
            acct = F.baseline(view.history, code, t, model.features)[0] if code is not None else math.nan
            prec = [
                math.log1p(v)
                for p in f.precedents
                if p.weight > 0
                and not p.still_gathering
                and (v := target_value(p.metrics, f.metric)) is not None
            ]
            lo, med, hi = f.log
            s.add(
                ForecastGiven(
                    given_at=to_naive_utc(now),
                    source=source,
                    draft_id=d.draft_id,
                    account_id=ids[d.account],
                    text=d.text,
                    text_hash=ws.embedder.key(d.text),
                    planned_at=to_naive_utc(f.planned_at),
                    metric=f.metric,
                    coverage=f.coverage,
                    low=f.low,
                    median=f.median,
                    high=f.high,
                    low_log=lo,
                    median_log=med,
                    high_log=hi,
                    model_version=f.model_version,
                    calibration=f.calibration.method if f.calibration else "cqr",
                    alpha_t=f.calibration.alpha_t if f.calibration else 1.0 - f.coverage,
                    account_median_log=None if math.isnan(acct) else float(acct),
                    precedents_median_log=float(np.median(prec)) if prec else None,
                    precedents=json.dumps(
                        [
                            {
                                "post_id": p.post_id,
                                "account": p.account,
                                "text": p.text[:280],
                                "similarity": round(p.similarity, 4),
                                "value": target_value(p.metrics, f.metric),
                            }
                            for p in f.precedents[:5]
                        ],
                        ensure_ascii=False,
                    ),
                )
            )


# State -----------------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class _Scored:
    """What a forecast shows of the track record: the adaptive state, live
    coverage, and the last scored forecasts (held?, stated coverage)."""

    state: CalibrationState | None
    live: LiveCoverage
    recent: list[tuple[bool, float]]


# Per store: (metric, level) -> (the store's counters when read, the facts).
# They change only when the history or the scoring moves (Store.stamps), so
# a forecast reads one counter row instead of three queries.
_SCORED: weakref.WeakKeyDictionary[Any, dict[tuple[str, str], tuple[tuple[int, int], _Scored]]] = (
    weakref.WeakKeyDictionary()
)
_SCORED_LOCK = threading.Lock()


def _scored(store: Any, metric: str, coverage: float) -> _Scored:
    key = (metric, level_key(coverage))
    stamps = store.stamps()  # before the reads: a write meanwhile shows as a newer stamp
    with _SCORED_LOCK:
        hit = _SCORED.setdefault(store, {}).get(key)
    if hit is not None and hit[0] == stamps:
        return hit[1]
    facts = _Scored(
        state=_state(store, metric, coverage),
        live=live_coverage(store, metric, coverage),
        recent=_recent(store, metric, coverage),
    )
    with _SCORED_LOCK:
        _SCORED.setdefault(store, {})[key] = (stamps, facts)
    return facts


_IDS: weakref.WeakKeyDictionary[Any, tuple[int, dict[str, int]]] = weakref.WeakKeyDictionary()


def _account_ids(store: Any, handles: set[str]) -> dict[str, int]:
    """Accounts' row ids, read again only when the history's counter moved."""
    stamp = store.stamp()
    with _SCORED_LOCK:
        hit = _IDS.get(store)
    if hit is not None and hit[0] == stamp and handles <= hit[1].keys():
        return hit[1]
    with store.session() as s:
        ids = {h: int(i) for h, i in s.execute(select(Account.handle, Account.id))}
    with _SCORED_LOCK:
        _IDS[store] = (stamp, ids)
    return ids


def _recent(store: Any, metric: str, coverage: float) -> list[tuple[bool, float]]:
    """(held?, stated coverage) of the last scored forecasts, newest post first."""
    with store.session() as s:
        rows = s.execute(
            select(ForecastMatch.inside, ForecastGiven.coverage)
            .join(ForecastGiven, ForecastGiven.id == ForecastMatch.forecast_id)
            .join(Post, Post.id == ForecastMatch.post_pk)
            .where(ForecastGiven.metric == metric, ForecastMatch.inside.is_not(None), _at_level(coverage))
            .order_by(Post.posted_at.desc())
            .limit(RECENT_SCORED)
        ).all()
    return [(bool(r[0]), float(r[1])) for r in rows]


def _state(store: Any, metric: str, coverage: float) -> CalibrationState | None:
    with store.session() as s:
        state: CalibrationState | None = s.get(CalibrationState, (metric, level_key(coverage)))
        return state


def reset_adaptation(ws: Any, metric: str | None = None) -> int:
    """Forget what the adaptive calibration learnt (all metrics, or one)."""
    with ws.store.session() as s:
        q = delete(CalibrationState)
        if metric is not None:
            q = q.where(CalibrationState.metric == check_target(metric))
        return int(s.execute(q).rowcount or 0)


def live_coverage(store: Any, metric: str, coverage: float) -> LiveCoverage:
    """How often scored forecasts of this metric and level held so far."""
    with store.session() as s:
        n, k = s.execute(
            select(func.count(ForecastMatch.id), func.sum(cast(ForecastMatch.inside, Integer)))
            .join(ForecastGiven, ForecastGiven.id == ForecastMatch.forecast_id)
            .where(ForecastGiven.metric == metric, ForecastMatch.inside.is_not(None), _at_level(coverage))
        ).one()
    n, k = int(n or 0), int(k or 0)
    return LiveCoverage(
        scored=n, held=k, coverage=k / n if n else None, ci=list(_wilson(k, n)) if n else None
    )


def _wilson(k: int, n: int) -> tuple[float, float]:
    # Wilson score interval, 95%.
    return wilson_interval(k, n)


# Staleness -------------------------------------------------------------------


def staleness(
    ws: Any,
    metric: str,
    coverage: float = DEFAULT_COVERAGE,
    *,
    model: TrainedModel | None = None,
    now: datetime | None = None,
) -> dict[str, Any]:
    """Reasons to retrain: the model is old (settled posts or days), or live
    coverage of the last scored forecasts is outside its binomial band."""
    now = now or now_utc()
    st = ws.settings
    reasons: list[str] = []
    if model is None:
        try:
            model = ws.forecaster.model(metric)
        except NotReady:
            return {"stale": True, "warnings": [f"no model trained for {metric} yet"]}
    as_of = as_utc(datetime.fromisoformat(model.report.get("data_as_of") or model.report["trained_at"]))
    days = (now - as_of).total_seconds() / 86400
    if days > st.stale_after_days:
        reasons.append(
            f"the {metric} model is {days:.0f} days old (SOUNDING_STALE_AFTER_DAYS "
            f"{st.stale_after_days:g}); retrain with `sounding train`"
        )
    mature = st.maturity_hours * 3600.0
    # Posts settled since the model's data: counted on the cached history view.
    times = ws.forecaster.view(metric).history.time
    fresh = int(  # the view is sorted by time: two binary searches
        np.searchsorted(times, now.timestamp() - mature, side="right")
        - np.searchsorted(times, as_of.timestamp() - mature, side="right")
    )
    fresh = max(fresh, 0)
    recent = _scored(ws.store, metric, coverage).recent
    if fresh >= st.stale_after_posts:
        reasons.append(
            f"{fresh} posts have settled since the {metric} model was trained "
            f"(SOUNDING_STALE_AFTER_POSTS {st.stale_after_posts}); retrain"
        )
    if len(recent) >= RECENT_SCORED:
        held = sum(bool(r[0]) for r in recent)
        stated = float(np.mean([r[1] for r in recent]))
        # Central 95% of Binomial(n, stated): live coverage outside it is unlikely by chance.
        low, high = binom.interval(0.95, len(recent), stated)
        if not low <= held <= high:
            reasons.append(
                f"{coverage:.0%} intervals held for {held} of the last {len(recent)} scored "
                f"forecasts, outside the {int(low)}-{int(high)} expected by chance; the "
                "intervals may no longer fit this audience"
            )
    return {"stale": bool(reasons), "warnings": reasons, "newly_settled": int(fresh), "model_age_days": days}


# Matching --------------------------------------------------------------------


def link_drafts(
    ws: Any, path: str | Path, *, mapping: dict[str, str] | None = None, account: str | None = None
) -> int:
    """Store the explicit draft ids of an imported file (its ``draft_id``
    column, or the column ``--map draft_id=...`` names)."""
    mapping = mapping or {}
    col = mapping.get("draft_id", "draft_id")
    acc_col, id_col = mapping.get("account", "account"), mapping.get("post_id", "post_id")
    pairs: dict[tuple[str, str], str] = {}
    with Path(path).open("r", encoding="utf-8-sig", newline="") as handle:
        reader = csv.DictReader(handle)
        if col not in (reader.fieldnames or []):
            return 0
        for rec in reader:
            draft = (rec.get(col) or "").strip()
            acc = (rec.get(acc_col) or "").strip() or account
            pid = (rec.get(id_col) or "").strip()
            if draft and acc and pid:
                pairs[(acc, pid)] = draft
    if not pairs:
        return 0
    n = 0
    with ws.store.session() as s:
        for (acc, pid), draft in pairs.items():
            pk = s.scalar(
                select(Post.id)
                .join(Account, Account.id == Post.account_id)
                .where(Account.handle == acc, Post.post_id == pid)
            )
            if pk is None:  # a rejected row
                continue
            s.merge(PostDraftLink(post_pk=pk, draft_id=draft))
            n += 1
    return n


def match(ws: Any) -> int:
    """Match posts to the forecasts they fulfil; returns new matches."""
    st = ws.settings
    window = timedelta(hours=st.match_window_hours)
    with ws.store.session() as s:
        open_fc = s.execute(
            select(
                ForecastGiven.id,
                ForecastGiven.account_id,
                ForecastGiven.draft_id,
                ForecastGiven.given_at,
                ForecastGiven.planned_at,
                ForecastGiven.metric,
                ForecastGiven.text,
            ).where(ForecastGiven.id.not_in(select(ForecastMatch.forecast_id)))
        ).all()
        if not open_fc:
            return 0
        accounts = {r.account_id for r in open_fc}
        earliest = min(r.given_at for r in open_fc)
        posts = s.execute(
            select(Post.id, Post.account_id, Post.posted_at, Post.vector_key, PostDraftLink.draft_id)
            .outerjoin(PostDraftLink, PostDraftLink.post_pk == Post.id)
            .where(Post.account_id.in_(accounts), Post.posted_at > earliest)
            .order_by(Post.posted_at, Post.id)
        ).all()
        taken = {
            (m.post_pk, m.metric) for m in s.execute(select(ForecastMatch.post_pk, ForecastMatch.metric))
        }
    if not posts:
        return 0
    # Which (forecast, post) pairs are near enough in time to need a similarity.
    near = {
        f.id: [
            p
            for p in posts
            if p.account_id == f.account_id
            and p.posted_at > f.given_at
            and abs(p.posted_at - f.planned_at) <= window
        ]
        for f in open_fc
    }
    need = [f for f in open_fc if near[f.id]]
    sims: dict[tuple[int, int], float] = {}
    if need:
        texts = list(dict.fromkeys(f.text for f in need))
        tv = dict(zip(texts, ws.embedder.encode(texts), strict=True))
        keys = list(dict.fromkeys(p.vector_key for f in need for p in near[f.id]))
        pv = dict(zip(keys, ws.store.vectors(keys), strict=True))
        for f in need:
            for p in near[f.id]:
                sims[(f.id, p.id)] = float(np.dot(tv[f.text], pv[p.vector_key]))
    used: set[int] = set()
    new: list[ForecastMatch] = []
    stamp = to_naive_utc(now_utc())
    named = {f.draft_id for f in open_fc if f.draft_id}
    for p in posts:
        for metric in sorted({f.metric for f in open_fc}):
            if (p.id, metric) in taken:
                continue
            pool = [
                f
                for f in open_fc
                if f.metric == metric
                and f.id not in used
                and f.account_id == p.account_id
                and f.given_at < p.posted_at
            ]
            how, best, sim = "", None, None
            if p.draft_id and p.draft_id in named:
                cands = [f for f in pool if f.draft_id == p.draft_id]
                if cands:
                    best = max(cands, key=lambda f: (f.given_at, f.id))
                    how, sim = "draft_id", sims.get((best.id, p.id))
            else:
                cands = [
                    (sims[(f.id, p.id)], f)
                    for f in pool
                    if (f.id, p.id) in sims and sims[(f.id, p.id)] >= st.match_similarity
                ]
                if cands:
                    top = max(c[0] for c in cands)
                    best = max(
                        (f for sm, f in cands if sm >= top - SIMILARITY_TIE), key=lambda f: (f.given_at, f.id)
                    )
                    how, sim = "text_time", sims[(best.id, p.id)]
            if best is None:
                continue
            used.add(best.id)
            taken.add((p.id, metric))
            new.append(
                ForecastMatch(
                    forecast_id=best.id,
                    post_pk=p.id,
                    metric=metric,
                    how=how,
                    similarity=sim,
                    matched_at=stamp,
                    adapted=False,
                )
            )
    if new:
        with ws.store.session() as s:
            s.add_all(new)
    return len(new)


def score(ws: Any, *, now: datetime | None = None) -> int:
    """Score matched forecasts whose post is settled; refresh changed outcomes.
    Returns how many scores were written or changed."""
    now = now or now_utc()
    cutoff = to_naive_utc(now - timedelta(hours=ws.settings.maturity_hours))
    with ws.store.session() as s:
        rows = s.execute(
            select(ForecastMatch, ForecastGiven.low_log, ForecastGiven.high_log)
            .join(ForecastGiven, ForecastGiven.id == ForecastMatch.forecast_id)
            .join(Post, Post.id == ForecastMatch.post_pk)
            .where(Post.posted_at <= cutoff)
        ).all()
        details = ws.store.posts_by_pk([m.post_pk for m, _, _ in rows])
        changed = 0
        for m, lo, hi in rows:
            value = target_value(details[m.post_pk]["metrics"], m.metric) if m.post_pk in details else None
            if value is None or value == m.outcome:
                continue
            m.outcome, m.outcome_log = value, math.log1p(value)
            m.inside = bool(lo <= m.outcome_log <= hi)
            m.scored_at = to_naive_utc(now)
            changed += 1
    return changed


# Adaptation ------------------------------------------------------------------


def adapt(ws: Any, metric: str, *, now: datetime | None = None) -> dict[str, int]:
    """Feed new outcomes of ``metric`` to its ACI states (one per coverage
    level used so far); returns the outcomes fed per level."""
    now = now or now_utc()
    st = ws.settings
    model = ws.forecaster.model(metric)
    with ws.store.session() as s:
        levels = {
            level_key(c)
            for c in s.scalars(
                select(ForecastGiven.coverage).where(ForecastGiven.metric == metric).distinct()
            )
        }
        levels |= set(s.scalars(select(CalibrationState.level).where(CalibrationState.metric == metric)))
    levels.add(level_key(DEFAULT_COVERAGE))  # warm up the default level before any forecast
    fed: dict[str, int] = {}
    for level in sorted(levels):
        fed[level] = _adapt_level(
            ws,
            model,
            metric,
            float(level),
            now=now,
            gamma=st.adaptive_gamma,
            min_scored=st.adaptive_min_scored,
        )
    return fed


def _adapt_level(
    ws: Any,
    model: TrainedModel,
    metric: str,
    coverage: float,
    *,
    now: datetime,
    gamma: float,
    min_scored: int,
) -> int:
    alpha, key = 1.0 - coverage, level_key(coverage)
    fed = 0
    with ws.store.session() as s:
        state = s.get(CalibrationState, (metric, key))
        if state is None:
            state = CalibrationState(
                metric=metric,
                level=key,
                alpha_t=alpha,
                gamma=gamma,
                real_updates=0,
                pseudo_updates=0,
                updated_at=to_naive_utc(now),
            )
            s.add(state)
        # Real outcomes, in posting order, against the band that was given.
        real = (
            s.execute(
                select(ForecastMatch)
                .join(ForecastGiven, ForecastGiven.id == ForecastMatch.forecast_id)
                .join(Post, Post.id == ForecastMatch.post_pk)
                .where(
                    ForecastGiven.metric == metric,
                    ForecastMatch.inside.is_not(None),
                    ForecastMatch.adapted.is_(False),
                    _at_level(coverage),
                )
                .order_by(Post.posted_at, Post.id)
            )
            .scalars()
            .all()
        )
        for m in real:
            state.alpha_t = aci_step(state.alpha_t, alpha=alpha, gamma=state.gamma, miss=not m.inside)
            state.real_updates += 1
            m.adapted = True
            fed += 1
        state.updated_at = to_naive_utc(now)
        enough = state.real_updates >= min_scored
        since = state.pseudo_until
        alpha_t, g = state.alpha_t, state.gamma
    if enough:
        return fed
    pseudo = _pseudo_outcomes(ws, model, metric, coverage, since=since, now=now)
    if pseudo is None:
        return fed
    times, ys, bands = pseudo
    sorted_scores = _scores(model, coverage)
    updates = 0
    for y, (lo, hi) in zip(ys, bands, strict=True):
        shift, _ = _shift(sorted_scores, alpha, alpha_t)
        alpha_t = aci_step(alpha_t, alpha=alpha, gamma=g, miss=not lo - shift <= y <= hi + shift)
        updates += 1
    with ws.store.session() as s:
        state = s.get(CalibrationState, (metric, key))
        state.alpha_t = alpha_t
        state.pseudo_updates += updates
        state.pseudo_until = to_naive_utc(times[-1])
    return fed + updates


def _pseudo_outcomes(
    ws: Any, model: TrainedModel, metric: str, coverage: float, *, since: datetime | None, now: datetime
) -> tuple[list[datetime], list[float], list[tuple[float, float]]] | None:
    """Newly settled posts with no forecast of their own, each forecast as it
    would have been at its time (only posts settled before then count)."""
    mature = timedelta(hours=ws.settings.maturity_hours)
    start = (
        as_utc(datetime.fromisoformat(model.report.get("data_as_of") or model.report["trained_at"])) - mature
    )
    if since is not None:
        start = max(start, as_utc(since))
    frame = ws.store.posts_frame()
    if frame.empty:
        return None
    posted = frame["posted_at"]
    with ws.store.session() as s:
        real = set(s.scalars(select(ForecastMatch.post_pk).where(ForecastMatch.metric == metric)))
    keep = (posted > start) & (posted <= now - mature) & ~frame["pk"].isin(real)
    kept = frame[keep]
    values = target_values(kept, metric)
    measured = ~np.isnan(values)
    rows = kept[measured]
    if rows.empty:
        return None
    drafts = [
        Draft(text=t, account=a, planned_at=p.to_pydatetime())
        for t, a, p in zip(rows["text"], rows["account"], rows["posted_at"], strict=True)
    ]
    vecs = ws.store.vectors(list(rows["vector_key"]))
    try:
        found = ws.forecaster.forecast(drafts, metric=metric, coverage=coverage, now=now, vectors=vecs)
    except SoundingError:
        return None
    ys = [float(v) for v in np.log1p(values[measured])]
    return ([typing.cast(datetime, d.planned_at) for d in drafts], ys, [(f.log[0], f.log[2]) for f in found])


def after_import(
    ws: Any,
    path: str | Path,
    *,
    mapping: dict[str, str] | None = None,
    account: str | None = None,
    now: datetime | None = None,
) -> dict[str, Any]:
    """Everything the track record does after an import: explicit draft ids,
    matching, scoring, and adaptation of every metric with a model."""
    linked = link_drafts(ws, path, mapping=mapping, account=account)
    matched = match(ws)
    scored = score(ws, now=now)
    fed: dict[str, Any] = {}
    with ws.store.session() as s:
        metrics = set(s.scalars(select(ForecastGiven.metric).distinct()))
        metrics |= set(s.scalars(select(CalibrationState.metric).distinct()))
    # Metrics with a model warm up on pseudo-outcomes before their first forecast.
    metrics |= {m for m in TARGETS if versions(ws.settings.models_dir, m)}
    for metric in sorted(metrics):
        try:
            fed[metric] = adapt(ws, metric, now=now)
        except NotReady:
            continue
    return {"linked": linked, "matched": matched, "scored": scored, "adapted": fed}


# Report ----------------------------------------------------------------------


def report(
    ws: Any,
    *,
    since: datetime | None = None,
    account: str | None = None,
    metric: str = DEFAULT_METRIC,
    now: datetime | None = None,
) -> TrackRecord:
    """The track record of ``metric``: per month (of the forecast) and overall."""
    check_target(metric)
    if account is not None:
        ws.store.account(account)
    q = (
        select(ForecastGiven, Account.handle, ForecastMatch, Post.post_id, Post.posted_at)
        .join(Account, Account.id == ForecastGiven.account_id)
        .outerjoin(ForecastMatch, ForecastMatch.forecast_id == ForecastGiven.id)
        .outerjoin(Post, Post.id == ForecastMatch.post_pk)
        .where(ForecastGiven.metric == metric)
        .order_by(ForecastGiven.given_at, ForecastGiven.id)
    )
    if since is not None:
        q = q.where(ForecastGiven.given_at >= to_naive_utc(since))
    if account is not None:
        q = q.where(Account.handle == account)
    with ws.store.session() as s:
        rows = [_row(f, handle, m, pid, posted) for f, handle, m, pid, posted in s.execute(q)]
        states = [
            {
                "level": c.level,
                "alpha_t": c.alpha_t,
                "gamma": c.gamma,
                "outcomes": c.real_updates,
                "pseudo_outcomes": c.pseudo_updates,
            }
            for c in s.scalars(
                select(CalibrationState)
                .where(CalibrationState.metric == metric)
                .order_by(CalibrationState.level)
            )
        ]
    months: dict[str, list[dict[str, Any]]] = {}
    for r in rows:
        months.setdefault(r["given_at"][:7], []).append(r)
    settled = [r for r in rows if r["inside"] is not None]
    worst = sorted(settled, key=lambda r: -r["error_log"])[:WORST]
    # Rows carry working columns (baseline logs, match kind) the answer leaves out.
    return TrackRecord.model_validate(
        {
            "metric": metric,
            "as_of": (now or now_utc()).isoformat(),
            "filters": {"since": since.isoformat() if since else None, "account": account},
            "overall": summarise(rows),
            "months": [{"month": k, **summarise(v)} for k, v in sorted(months.items())],
            "worst": worst,
            "calibration": states,
            "points": settled,
        }
    )


def _row(
    f: ForecastGiven, handle: str, m: ForecastMatch | None, pid: str | None, posted: datetime | None
) -> dict[str, Any]:
    scored = m is not None and m.inside is not None
    return {
        "forecast_id": f.id,
        "given_at": as_utc(f.given_at).isoformat(),
        "source": f.source,
        "draft_id": f.draft_id,
        "account": handle,
        "text": f.text,
        "planned_at": as_utc(f.planned_at).isoformat(),
        "coverage": f.coverage,
        "low": f.low,
        "median": f.median,
        "high": f.high,
        "model_version": f.model_version,
        "calibration": f.calibration,
        "matched": m is not None,
        "match": None if m is None else m.how,
        "post_id": pid,
        "posted_at": as_utc(posted).isoformat() if posted else None,
        "outcome": m.outcome if m is not None and scored else None,
        "inside": bool(m.inside) if m is not None and scored else None,
        "error_log": abs(f.median_log - typing.cast(float, m.outcome_log))
        if m is not None and scored
        else None,
        "baseline_logs": {
            "account_median": f.account_median_log,
            "precedents_median": f.precedents_median_log,
        },
        "outcome_log": m.outcome_log if m is not None and scored else None,
        "precedents": json.loads(f.precedents or "[]"),
    }


def summarise(rows: Sequence[dict[str, Any]]) -> dict[str, Any]:
    """Counts, live against stated coverage (Wilson 95% interval) and MAE(log)
    of sounding and of the simple forecasters on the same settled posts."""
    settled = [r for r in rows if r["inside"] is not None]
    n, k = len(settled), sum(r["inside"] for r in settled)
    out: dict[str, Any] = {
        "given": len(rows),
        "matched": sum(r["matched"] for r in rows),
        "settled": n,
        "stated_coverage": float(np.mean([r["coverage"] for r in settled])) if n else None,
        "live_coverage": k / n if n else None,
        "live_coverage_ci": list(_wilson(k, n)) if n else None,
        "mae_log": float(np.mean([r["error_log"] for r in settled])) if n else None,
        "baselines": {},
    }
    for name in BASELINES:
        errs = []
        for r in settled:
            b = r["baseline_logs"][name]
            if b is None:  # no precedents settled then: the account's median stands in
                b = r["baseline_logs"]["account_median"]
            if b is not None:
                errs.append(abs(b - r["outcome_log"]))
        out["baselines"][name] = {"mae_log": float(np.mean(errs)) if errs else None, "posts": len(errs)}
    return out


def parse_since(value: str | None) -> datetime | None:
    """``--since`` / ``?since=``: a date (UTC midnight) or an RFC 3339 time."""
    if not value:
        return None
    raw = value.strip()
    try:
        return parse_time(raw + ("T00:00:00+00:00" if len(raw) == 10 else ""), where="since")
    except SoundingError as exc:
        raise InputError(exc.message, field="since", value=value) from None
