"""The calibration a forecast is built with: the CQR band, widened or narrowed
by the adaptive conformal level of the track record (ACI, Gibbs & Candès 2021),
with the live coverage and warnings the track record adds.

The forecaster applies it while it builds the answer; the track record only
says what the state is (``CalibrationSource``) and records afterwards.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Protocol

import numpy as np

from models.aci_warmup import reason, served_shift
from models.adaptive import adaptive_quantile
from models.artefact import TrainedModel
from service.answers import Calibration, LiveCoverage
from service.storage.track_tables import LevelState, level_key


@dataclass(frozen=True, slots=True)
class TrackFacts:
    """What the track record adds to a forecast at one metric and level."""

    state: LevelState | None
    live: LiveCoverage
    warnings: list[str] = field(default_factory=list)


class CalibrationSource(Protocol):
    """The track record, as the forecaster asks it for the facts of a model."""

    def facts(self, model: TrainedModel) -> TrackFacts: ...


def band_shift(sorted_scores: np.ndarray, alpha: float, alpha_t: float) -> tuple[float, bool]:
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


def adapted_band(
    band: tuple[float, float, float],
    model: TrainedModel,
    coverage: float,
    state: LevelState | None,
    *,
    min_real: int,
) -> tuple[tuple[float, float, float], Calibration]:
    """The band (log1p scale) at the working level alpha_t, same median, and
    the calibration that says how it was made; never wider before ``min_real``
    real outcomes (models.aci_warmup)."""
    alpha = 1.0 - coverage
    alpha_t = alpha if state is None else state.alpha_t
    info = Calibration(
        method="cqr",
        level=level_key(coverage),
        alpha=alpha,
        alpha_t=alpha_t,
        reason=reason(alpha=alpha, alpha_t=alpha_t, real=0, pseudo=0, min_real=min_real, held=False),
    )
    if state is None or not (state.real_updates or state.pseudo_updates):
        return band, info
    shift, capped = band_shift(model.forecaster.calibration_scores(coverage), alpha, alpha_t)
    shift, held = served_shift(shift, real_outcomes=state.real_updates, min_real=min_real)
    info = info.model_copy(
        update={
            "method": "cqr+aci",
            "outcomes": state.real_updates,
            "pseudo_outcomes": state.pseudo_updates,
            "gamma": state.gamma,
            "capped": capped and not held,
            "widening_held": held,
            "reason": reason(
                alpha=alpha,
                alpha_t=alpha_t,
                real=state.real_updates,
                pseudo=state.pseudo_updates,
                min_real=min_real,
                held=held,
            ),
        }
    )
    lo, med, hi = band
    return (min(lo - shift, med), med, max(hi + shift, med)), info
