"""What the track record adds to a forecast: the adaptive calibration state,
live coverage so far, and the reasons to retrain (staleness)."""

from __future__ import annotations

from datetime import datetime
from typing import Any

import numpy as np

from models.artefact import TrainedModel
from models.errors import NotReady
from models.metrics import DEFAULT_COVERAGE
from models.proportions import wilson_interval
from service.answers import LiveCoverage
from service.clock import as_utc, now_utc
from service.forecast.calibration import TrackFacts
from service.storage.store import Store
from service.storage.track_tables import RECENT_SCORED
from service.track.parts import TrackedDir


class TrackCalibration:
    """The track record as a forecast's calibration source: the adaptive state
    and live coverage of one metric and level, and the staleness warnings."""

    def __init__(self, ws: TrackedDir, metric: str, coverage: float, *, now: datetime) -> None:
        self.ws = ws
        self.metric = metric
        self.coverage = coverage
        self.now = now
        self.model: TrainedModel | None = None  # the model the facts were asked for

    def facts(self, model: TrainedModel) -> TrackFacts:
        self.model = model
        scored = self.ws.store.track.scored(self.metric, self.coverage)
        warnings = staleness(self.ws, self.metric, self.coverage, model=model, now=self.now)["warnings"]
        return TrackFacts(
            state=scored.state,
            live=live_coverage(self.ws.store, self.metric, self.coverage),
            warnings=warnings,
        )


def live_coverage(store: Store, metric: str, coverage: float) -> LiveCoverage:
    """How often scored forecasts of this metric and level held so far."""
    facts = store.track.scored(metric, coverage)
    n, k = facts.scored, facts.held
    return LiveCoverage(scored=n, held=k, coverage=k / n if n else None, ci=list(wilson(k, n)) if n else None)


def wilson(k: int, n: int) -> tuple[float, float]:
    """The Wilson score interval (95%) of k successes in n trials."""
    return wilson_interval(k, n)


def staleness(
    ws: TrackedDir,
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
    recent = ws.store.track.scored(metric, coverage).recent
    if fresh >= st.stale_after_posts:
        reasons.append(
            f"{fresh} posts have settled since the {metric} model was trained "
            f"(SOUNDING_STALE_AFTER_POSTS {st.stale_after_posts}); retrain"
        )
    if len(recent) >= RECENT_SCORED:
        held = sum(bool(r[0]) for r in recent)
        stated = float(np.mean([r[1] for r in recent]))
        # Central 95% of Binomial(n, stated): live coverage outside it is unlikely by chance.
        from scipy.stats import binom

        low, high = binom.interval(0.95, len(recent), stated)
        if not low <= held <= high:
            reasons.append(
                f"{coverage:.0%} intervals held for {held} of the last {len(recent)} scored "
                f"forecasts, outside the {int(low)}-{int(high)} expected by chance; the "
                "intervals may no longer fit this audience"
            )
    return {"stale": bool(reasons), "warnings": reasons, "newly_settled": int(fresh), "model_age_days": days}
