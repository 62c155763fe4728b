"""A forecast as sounding answers it: an interval with its stated and
backtested coverage, the precedents that drove it and what moved it."""

from __future__ import annotations

from pydantic import BaseModel, Field

from models.metrics import Metric, from_log
from service.answers import Calibration, Coverage, Instant, LiveCoverage
from service.history.precedents import WeightedPrecedent
from service.history.repeats import Repeat

CAUTION = (
    "An estimate from this team's own history, not a certainty: the interval "
    "is set to hold as often as it says, and past tries on the team's posts "
    "say how often such intervals did."
)


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
    # The calibration it was built with (service.forecast.calibration).
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


def from_model_scale(value: float, metric: str) -> float:
    """A value on the model's log1p scale, back on the metric's own scale (rounded)."""
    v = float(from_log(value))
    v = max(v, 0.0)
    return round(v, 5) if metric == Metric.ENGAGEMENT_RATE else round(v, 1)
