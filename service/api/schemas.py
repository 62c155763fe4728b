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
