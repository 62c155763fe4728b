"""Adaptive conformal calibration (ACI, Gibbs & Candès 2021) fed by the track
record: real outcomes against the band that was given, and, while the record is
short, newly settled posts forecast as they would have been (pseudo-outcomes)."""

from __future__ import annotations

import typing
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np

from models.aci_warmup import served_shift
from models.adaptive import aci_step
from models.artefact import TrainedModel, versions
from models.errors import NotReady, SoundingError
from models.metrics import DEFAULT_COVERAGE, TARGETS, check_target, target_values
from service.clock import as_utc, now_utc, to_naive_utc
from service.forecast.calibration import band_shift
from service.forecast.draft import Draft
from service.ingest.options import ImportOptions
from service.storage.track_tables import level_key
from service.track.matching import link_drafts, match, score
from service.track.parts import TrackedDir


def adapt(ws: TrackedDir, metric: str, *, now: datetime | None = None) -> dict[str, int]:
    """Feed new outcomes of ``metric`` to its ACI states (one per coverage
    level used so far); returns the outcomes fed per level."""
    now = now or now_utc()
    st = ws.settings
    model = ws.forecaster.model(metric)
    levels = ws.store.track.levels_used(metric)
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
    ws: TrackedDir,
    model: TrainedModel,
    metric: str,
    coverage: float,
    *,
    now: datetime,
    gamma: float,
    min_scored: int,
) -> int:
    alpha = 1.0 - coverage
    fed = 0
    # Real outcomes, in posting order, against the band that was given.
    with ws.store.track.adapting(metric, coverage, gamma=gamma, now=to_naive_utc(now)) as (state, real):
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
    sorted_scores = model.forecaster.calibration_scores(coverage)
    updates = 0
    for y, (lo, hi) in zip(ys, bands, strict=True):
        # Scored against the band as it would have been served (pseudo-
        # outcomes only run before enough real ones, so never wider).
        shift, _ = served_shift(band_shift(sorted_scores, alpha, alpha_t)[0], real_outcomes=0, min_real=1)
        # Floored at the stated level: pseudo-outcomes may narrow the band
        # but never build up a widening that real outcomes did not ask for.
        alpha_t = max(alpha, aci_step(alpha_t, alpha=alpha, gamma=g, miss=not lo - shift <= y <= hi + shift))
        updates += 1
    ws.store.track.add_pseudo_outcomes(
        metric, coverage, alpha_t=alpha_t, updates=updates, until=to_naive_utc(times[-1])
    )
    return fed + updates


def _pseudo_outcomes(
    ws: TrackedDir,
    model: TrainedModel,
    metric: str,
    coverage: float,
    *,
    since: datetime | None,
    now: datetime,
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
    real = ws.store.track.matched_posts(metric)
    keep = (posted > start) & (posted <= now - mature) & ~frame["pk"].isin(real)
    kept = frame[keep]
    values = target_values(kept, metric)
    measured = ~np.isnan(values)
    rows = kept[measured]
    if rows.empty:
        return None
    drafts = [
        # The post's own media flag: left out, posts with media were forecast
        # as text only and missed more often than the calibration said.
        Draft(text=t, account=a, planned_at=p.to_pydatetime(), has_media=bool(m))
        for t, a, p, m in zip(
            rows["text"], rows["account"], rows["posted_at"], rows["has_media"], strict=True
        )
    ]
    vecs = ws.store.vectors(list(rows["vector_key"]))
    try:
        found = ws.forecaster.forecast(drafts, metric=metric, coverage=coverage, now=now, vectors=vecs)
    except SoundingError:
        return None
    ys = [float(v) for v in np.log1p(values[measured])]
    return ([typing.cast(datetime, d.planned_at) for d in drafts], ys, [(f.log[0], f.log[2]) for f in found])


def after_import(
    ws: TrackedDir, path: str | Path, options: ImportOptions, *, now: datetime | None = None
) -> dict[str, Any]:
    """Everything the track record does after an import: explicit draft ids,
    matching, scoring, and adaptation of every metric with a model."""
    linked = link_drafts(
        ws, path, mapping=options.mapping, account=options.account, encoding=options.encoding
    )
    matched = match(ws)
    scored = score(ws, now=now)
    fed: dict[str, Any] = {}
    metrics = ws.store.track.metrics_in_use()
    # Metrics with a model warm up on pseudo-outcomes before their first forecast.
    metrics |= {m for m in TARGETS if versions(ws.settings.models_dir, m)}
    for metric in sorted(metrics):
        try:
            fed[metric] = adapt(ws, metric, now=now)
        except NotReady:
            continue
    return {"linked": linked, "matched": matched, "scored": scored, "adapted": fed}


def reset_adaptation(ws: TrackedDir, metric: str | None = None) -> int:
    """Forget what the adaptive calibration learnt (all metrics, or one)."""
    return ws.store.track.reset(None if metric is None else check_target(metric))
