"""The track record's answer: forecasts given, matched and scored, per month
and overall, against the simple forecasters (``GET /v1/track-record``,
``sounding track-record``)."""

from __future__ import annotations

from pydantic import BaseModel, Field

from models.metrics import Metric


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


class TrackPoint(BaseModel):
    """One forecast given and what happened: its interval and the outcome."""

    given_at: str
    posted_at: str | None
    coverage: float
    low: float
    median: float
    high: float
    outcome: float | None
    inside: bool | None


class Miss(TrackPoint):
    forecast_id: int
    draft_id: str | None
    account: str
    text: str
    planned_at: str
    post_id: str | None
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
