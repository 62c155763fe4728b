"""Checking drafts as sounding gives them: the forecast built whole (its band
adapted to the track record's outcomes so far, with live coverage and
staleness warnings), then recorded in the track record unless asked not to."""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime

import numpy as np

from models.metrics import DEFAULT_COVERAGE, DEFAULT_METRIC
from service.clock import now_utc
from service.forecast.answer import Forecast
from service.forecast.draft import Draft
from service.history.match_modes import Match
from service.track.facts import TrackCalibration
from service.track.parts import TrackedDir
from service.track.recording import record_forecasts


def check_drafts(
    ws: TrackedDir,
    drafts: Sequence[Draft],
    *,
    metric: str = DEFAULT_METRIC,
    coverage: float = DEFAULT_COVERAGE,
    record: bool = True,
    source: str = "check",
    now: datetime | None = None,
    vectors: np.ndarray | None = None,
    match: Match = Match.MEANING,
) -> list[Forecast]:
    """Forecast ``drafts`` with the track record's calibration; record them
    unless ``record`` is False (``source`` says where they were asked);
    ``match`` says how near-repeats are found. The caller holds the store's
    counters for the request (``Store.pinned``)."""
    now = now or now_utc()
    calibration = TrackCalibration(ws, metric, coverage, now=now)
    found = ws.forecaster.forecast(
        list(drafts),
        metric=metric,
        coverage=coverage,
        now=now,
        vectors=vectors,
        calibration=calibration,
        match=match,
    )
    if record and found and calibration.model is not None:
        record_forecasts(ws, drafts, found, model=calibration.model, source=source, now=now)
    return found
