"""How sure the best hour is: the share of the timing component's bootstrap
refits in which the slot with the highest served median stays highest."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from models.regressor import QuantileForecaster
from models.stacking import StackedForecaster
from models.timing import best_hour_share


def best_hour_confidence(
    model: QuantileForecaster | StackedForecaster,
    *,
    local_hours: Sequence[float],
    weekdays: Sequence[int],
    account: int,
    medians: Sequence[float],
) -> float | None:
    """Share of the timing component's bootstrap refits in which the slot
    with the highest served median (log) stays highest; None for a model
    without a timing component (older versions)."""
    if not isinstance(model, StackedForecaster) or len(medians) == 0:
        return None
    n = len(medians)
    clock = (
        np.asarray(local_hours, dtype=float),
        np.asarray(weekdays, dtype=float),
        np.full(n, float(account)),
    )
    scale = model.timing_scale_
    effect = scale * model.timing_.predict(*clock)
    draws = model.timing_.draws(*clock)
    if draws.shape[0] == 0:
        return None
    return round(best_hour_share(np.asarray(medians, dtype=float), effect, draws, scale=scale), 3)
