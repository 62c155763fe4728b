"""Pydantic request and response models of the HTTP API.

Kept apart from the SQLAlchemy tables: these are the public contract.
"""

from __future__ import annotations

from datetime import datetime

from pydantic import BaseModel, ConfigDict, Field

CAUTION = (
    "Forecasts are estimates from this team's own history, given as intervals "
    "with their backtested coverage; they are not certainties."
)


class Strict(BaseModel):
    model_config = ConfigDict(extra="forbid")


class ErrorDetail(BaseModel):
    code: str
    message: str
    where: str | None = None
    field: str | None = None
    hint: str | None = None
    limit: str | None = None
    maximum: int | None = None
    problems: list[dict[str, str | None]] | None = None


class ErrorBody(BaseModel):
    """The shape of every error answer."""

    error: ErrorDetail


class Metrics(BaseModel):
    impressions: int | None = None
    engagements: int | None = None
    likes: int | None = None
    reposts: int | None = None
    replies: int | None = None
    link_clicks: int | None = None
    profile_clicks: int | None = None


class IndexState(BaseModel):
    state: str = Field(description="ready, stale or missing")
    count: int


class Health(BaseModel):
    posts: int
    accounts: int
    model_id: str
    index: IndexState
    forecaster: str | None = Field(default=None, description="Version of the model in use")


class PrecedentsRequest(Strict):
    text: str = Field(min_length=1, description="The draft")
    account: str | None = Field(default=None, description="Only this account's posts")
    k: int = Field(default=10, ge=1, le=100)
    since: datetime | None = None
    until: datetime | None = None


class PrecedentOut(BaseModel):
    post_id: str
    account: str
    posted_at: datetime
    text: str
    similarity: float
    metrics: Metrics
    mature: bool = Field(description="False while the post may still be gathering impressions")


class PrecedentsResponse(BaseModel):
    precedents: list[PrecedentOut]


class AccountOut(BaseModel):
    handle: str
    display_name: str | None
    timezone: str
    posts: int


class ImportProblem(BaseModel):
    line: int = Field(description="Line of the file where the rejected row starts")
    column: str | None = Field(description="Our column name, when one field is at fault")
    reason: str


class ImportSummaryOut(BaseModel):
    added: int
    updated: int
    unchanged: int
    rejected: int
    embedded: int = Field(description="Texts embedded for the first time")
    problems: list[ImportProblem]


class ForgetOut(BaseModel):
    deleted: int = Field(description="Posts deleted, with their snapshots and unused vectors")
    posts: int = Field(description="Posts left in the store")


# Forecasts ------------------------------------------------------------------

METRIC_FIELD = Field(
    default="impressions",
    description="impressions, engagements, likes, reposts, replies, link_clicks, "
    "profile_clicks or engagement_rate",
)


class DraftIn(Strict):
    text: str = Field(min_length=1, description="The draft's text")
    account: str = Field(min_length=1, description="Handle of the account that would post it")
    planned_at: str | None = Field(
        default=None,
        description="ISO 8601 time; without an offset it is read in the account's zone. "
        "Default: now.",
        examples=["2026-12-02T10:00:00+01:00"],
    )
    draft_id: str | None = None


class ForecastRequest(DraftIn):
    metric: str = METRIC_FIELD
    coverage: float = Field(default=0.8, ge=0.5, le=0.95)


class ForecastBatchRequest(Strict):
    drafts: list[DraftIn] = Field(min_length=1)
    metric: str = METRIC_FIELD
    coverage: float = Field(default=0.8, ge=0.5, le=0.95)


class PrecedentWeighted(PrecedentOut):
    weight: float = Field(description="Share in the similarity-weighted mean of the precedents")


class GroupEffectOut(BaseModel):
    group: str
    log_contribution: float
    factor: float = Field(description="Multiplicative effect on (1 + metric)")
    summary: str


class Contributions(BaseModel):
    scale: str
    expected_log: float
    predicted_log: float
    groups: list[GroupEffectOut]


class ForecastOut(BaseModel):
    draft_id: str | None = None
    metric: str
    account: str
    planned_at: datetime
    local_time: str
    low: float
    median: float
    high: float
    coverage: float = Field(description="Nominal coverage of [low, high]")
    backtested_coverage: float | None = Field(
        description="How often intervals of this level held in time-ordered backtests"
    )
    model_version: str
    precedents: list[PrecedentWeighted]
    contributions: Contributions
    warnings: list[str]
    caution: str


class ForecastList(BaseModel):
    forecasts: list[ForecastOut]
