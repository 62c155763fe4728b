"""Pydantic request and response models of the HTTP API.

Kept apart from the SQLAlchemy tables: these are the public contract.
"""

from __future__ import annotations

from datetime import date, datetime
from typing import Annotated, Literal

from pydantic import AfterValidator, BaseModel, ConfigDict, Field

from models.metrics import DEFAULT_COVERAGE, DEFAULT_METRIC, MAX_COVERAGE, MIN_COVERAGE, TARGETS
from models.segments import DEFAULT_HOUR_EDGES, DEFAULT_LENGTH_EDGES, DEFAULT_MIN_N

from ..segmenting import (
    DEFAULT_EXAMPLES,
    DEFAULT_K,
    DEFAULT_THRESHOLD,
    MAX_EXAMPLES,
    By,
    Mode,
)
from ..segmenting import SegmentResult as SegmentResult  # the answer, used as it is
from ..timeparse import EARLIEST, as_utc, latest_time, range_text


def _time_in_range(dt: datetime) -> datetime:
    """A time field inside the accepted range (service.timeparse), naive read as UTC."""
    try:
        ok = EARLIEST <= as_utc(dt) <= latest_time()
    except OverflowError:
        ok = False
    if not ok:
        raise ValueError(f"{dt.isoformat()} is outside the accepted range, {range_text()}")
    return dt


def _day_in_range(day: date) -> date:
    if not EARLIEST.date() <= day <= latest_time().date():
        raise ValueError(f"{day.isoformat()} is outside the accepted range, {range_text()}")
    return day


InRangeTime = Annotated[datetime, AfterValidator(_time_in_range)]
InRangeDay = Annotated[date, AfterValidator(_day_in_range)]


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


class EmbeddingState(BaseModel):
    backend: str = Field(
        description="onnx or torch once loaded; the setting (auto, onnx, "
        "torch) before the model is first used"
    )
    loaded: bool
    quantize: str = Field(description="none, or int8: approximate vectors, kept apart")
    vector_space: str = Field(description="What the stored vectors are vectors of")
    export: str | None = Field(default=None, description="The ONNX export in use")
    fallback: str | None = Field(default=None, description="Why ONNX is not in use")


class SearchState(BaseModel):
    approximate: bool = Field(description="true for an HNSW graph, false for an exact scan")
    recall_at_10: float = Field(
        description="recall@10 against exact search, measured at build "
        "on a sample of the index's own vectors (1.0 when exact)"
    )
    ef_search: int | None = Field(default=None, description="HNSW efSearch chosen at build")


class Health(BaseModel):
    posts: int
    accounts: int
    model_id: str
    embedding: EmbeddingState | None = None
    index: IndexState
    search: SearchState | None = Field(default=None, description="How the index searches")
    forecaster: str | None = Field(default=None, description="Version of the model in use")
    damaged_models: list[str] = Field(
        default_factory=list,
        description="Model versions skipped because their files do not match their checksums",
    )
    read_only: bool = Field(default=False, description="The data directory refuses changes")


class PrecedentsRequest(Strict):
    text: str = Field(min_length=1, description="The draft")
    account: str | None = Field(default=None, description="Only this account's posts")
    k: int = Field(default=10, ge=1, le=100)
    since: InRangeTime | None = None
    until: InRangeTime | None = None


class PrecedentOut(BaseModel):
    post_id: str
    account: str
    posted_at: datetime
    text: str
    similarity: float
    metrics: Metrics
    still_gathering: bool = Field(
        description="True while the post's metrics are not final yet (younger than the maturity window)"
    )


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
    hint: str | None = Field(default=None, description="A fix to try")
    post_id: str | None = Field(default=None, description="The row's post_id, when readable")


class ImportSummaryOut(BaseModel):
    added: int
    updated: int
    unchanged: int
    rejected: int
    embedded: int = Field(description="Texts embedded for the first time")
    approximate: int = Field(
        default=0, description="Rows stored with an abbreviated (1.2K) or derived count, marked approximate"
    )
    skipped_lines: int = Field(
        default=0, description="Lines never read because the rest of the file was not CSV"
    )
    stopped: str | None = Field(default=None, description="Why reading stopped early, if it did")
    problems: list[ImportProblem]


class ImportColumnOut(BaseModel):
    ours: str
    theirs: str | None = Field(description="The file's column, or null when not read")
    reads: str = Field(description="How its values are read")


class ImportPreviewRowOut(BaseModel):
    line: int
    account: str
    post_id: str
    text: str
    posted_at: datetime = Field(description="UTC")
    local_time: str = Field(description="In the zone the time was read in, with its offset")
    zone: str
    metrics: dict[str, int | None]
    approximate: list[str] = Field(description="Metrics known only roughly")
    has_media: bool | None


class ImportFixOut(BaseModel):
    column: str | None
    hint: str
    rows: int = Field(description="Rejected rows this fix concerns")
    first_line: int


class ImportPreviewOut(BaseModel):
    """A dry run: what the import would do; nothing was stored."""

    dry_run: Literal[True]
    columns: list[ImportColumnOut]
    unused_columns: list[str]
    time_layout: str
    rows: list[ImportPreviewRowOut] = Field(description="The first rows as read")
    would_import: int
    approximate: int
    rejected: int
    skipped_lines: int
    stopped: str | None
    problems: list[ImportProblem]
    fixes: list[ImportFixOut]


class ForgetOut(BaseModel):
    deleted: int = Field(description="Posts deleted, with their snapshots and unused vectors")
    posts: int = Field(description="Posts left in the store")


# Forecasts ------------------------------------------------------------------

METRIC_FIELD = Field(
    default=DEFAULT_METRIC.value,
    description="One of: " + ", ".join(TARGETS),
    json_schema_extra={"enum": list(TARGETS)},
)
#: The coverage a request may ask for (one definition for every endpoint).
COVERAGE_FIELD = Field(
    default=DEFAULT_COVERAGE, ge=MIN_COVERAGE, le=MAX_COVERAGE, description="Nominal coverage of the interval"
)


class DraftIn(Strict):
    text: str = Field(min_length=1, description="The draft's text")
    account: str = Field(min_length=1, description="Handle of the account that would post it")
    planned_at: str | None = Field(
        default=None,
        description="ISO 8601 time; without an offset it is read in the account's zone. Default: now.",
        examples=["2026-12-02T10:00:00+01:00"],
    )
    draft_id: str | None = None
    has_media: bool = Field(default=False, description="An image or video goes with the text")


class ForecastRequest(DraftIn):
    metric: str = METRIC_FIELD
    coverage: float = COVERAGE_FIELD
    record: bool = Field(default=True, description="Keep the forecast in the track record")


class ForecastBatchRequest(Strict):
    drafts: list[DraftIn] = Field(min_length=1)
    metric: str = METRIC_FIELD
    coverage: float = COVERAGE_FIELD
    record: bool = Field(default=True, description="Keep the forecasts in the track record")


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


class RepeatOut(BaseModel):
    """A recent post that the draft nearly repeats (service.review.near_repeats)."""

    scope: str = Field(description="own: the draft's account; team: another account")
    post_id: str
    account: str
    posted_at: datetime
    days_before: float = Field(description="Days before the planned time")
    similarity: float
    metric: str
    value: float | None = Field(description="The post's metric so far")
    still_gathering: bool
    message: str


class CalibrationOut(BaseModel):
    """Which calibration shaped the interval (service.track_record, issue 11)."""

    method: str = Field(
        description="cqr: as trained; cqr+aci: adapted to scored outcomes "
        "(adaptive conformal inference, Gibbs & Candes 2021)"
    )
    level: str
    alpha: float
    alpha_t: float = Field(description="Working miscoverage level after adaptation")
    outcomes: int = Field(description="Scored forecasts the adaptation has seen")
    pseudo_outcomes: int = Field(description="Settled posts forecast as they would have been")
    capped: bool
    gamma: float | None = None


class LiveCoverageOut(BaseModel):
    scored: int = Field(description="Forecasts of this metric and level scored so far")
    held: int
    coverage: float | None = Field(
        description="Share of scored forecasts whose outcome fell inside the interval"
    )
    ci: list[float] | None = Field(description="Wilson 95% interval of that share")


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
    repeats: list[RepeatOut] = Field(
        default_factory=list, description="Near-repeats behind the warnings, most similar first"
    )
    calibration: CalibrationOut | None = None
    live_coverage: LiveCoverageOut | None = None
    note: str | None = Field(
        default=None,
        description="One plain line from the backtest when the history's text "
        "carries little signal (what the forecast leans on instead)",
    )


class ForecastList(BaseModel):
    forecasts: list[ForecastOut]


# Draft review: best hours and variants (service.review) ----------------------


class HoursRequest(Strict):
    text: str = Field(min_length=1, description="The draft's text")
    account: str = Field(min_length=1, description="Handle of the account that would post it")
    day: InRangeDay | None = Field(
        default=None,
        description="Local calendar day (ISO 8601 date) in the account's zone; default: tomorrow there",
        examples=["2026-12-03"],
    )
    week: bool = Field(default=False, description="Seven days from `day`, hour by hour")
    metric: str = METRIC_FIELD
    coverage: float = COVERAGE_FIELD
    top: int = Field(default=3, ge=1, le=168, description="How many of the best hours to list")
    has_media: bool = Field(default=False, description="An image or video goes with the text")


class SlotOut(BaseModel):
    planned_at: datetime = Field(description="The slot's start, UTC")
    local_time: str = Field(description="The slot's start in the account's zone, with its offset")
    local_date: date
    local_hour: str = Field(description="Local wall-clock hour, HH:MM")
    utc_offset: str = Field(description="UTC offset at that instant, e.g. +01:00")
    low: float
    median: float
    high: float
    rank: int = Field(description="1 = highest median")
    tied_with_best: bool = Field(description="Interval about equal to the best slot's (see rule)")
    warnings: list[str]


class HoursOut(BaseModel):
    account: str
    timezone: str
    metric: str
    coverage: float
    backtested_coverage: float | None
    model_version: str
    mode: str = Field(description="day or week")
    first_day: date
    last_day: date
    n_slots: int
    told_apart: bool = Field(description="False when most hours cannot be told apart")
    fraction_tied_with_best: float = Field(description="Share of the other slots about equal to the best")
    best_stays_best: float | None = Field(
        default=None,
        description="Share of bootstrap refits of the timing effect in which the "
        "best slot stays best (null for models without a timing component)",
    )
    summary: str
    rule: str
    best: list[SlotOut] = Field(description="Slots about equal to the best, highest median first")
    slots: list[SlotOut] = Field(description="Every slot, in time order")
    warnings: list[str]
    caution: str


class VariantsRequest(Strict):
    texts: list[str] = Field(
        min_length=2,
        description="Two to ten phrasings of one draft (more answers 413, like the other limits)",
    )
    account: str = Field(min_length=1)
    planned_at: str | None = Field(
        default=None,
        description="ISO 8601 time; without an offset it is read in the account's zone. Default: now.",
        examples=["2026-12-03T12:30:00"],
    )
    metric: str = METRIC_FIELD
    coverage: float = COVERAGE_FIELD
    has_media: bool = Field(default=False, description="An image or video goes with every variant")


class VariantOut(BaseModel):
    index: int = Field(description="Position in the request, from 1")
    text: str
    rank: int
    low: float
    median: float
    high: float
    tied_with_best: bool
    precedents: list[str] = Field(description="Post ids of its precedents, most similar first")
    only_here: list[str] = Field(description="Precedent post ids no other variant has")
    warnings: list[str]


class VariantsOut(BaseModel):
    account: str
    planned_at: datetime
    local_time: str
    metric: str
    coverage: float
    backtested_coverage: float | None
    model_version: str
    told_apart: bool
    summary: str
    rule: str
    variants: list[VariantOut] = Field(description="Best first")
    caution: str


# Segments -------------------------------------------------------------------


class SegmentsRequest(Strict):
    topics: list[str] = Field(
        default_factory=list,
        description="Topic phrases, e.g. 'flowers in bloom'. 'a | b' is one topic with two "
        "alternative phrases (their vectors are averaged). No labels are needed.",
        examples=[["flowers in bloom", "shop offers | membership"]],
    )
    by: By | None = Field(
        default=None,
        description="A one-way split by local hour bucket, local weekday, link in the text, "
        "media attached, text length band or account. With topics too, the answer adds the "
        "two-way table topic x by.",
    )
    metric: str = METRIC_FIELD
    mode: Mode = Field(
        default="nearest",
        description="nearest: each post joins its most similar topic if the cosine similarity "
        "reaches threshold, else 'other'. top-k: each topic takes its k most similar posts.",
    )
    k: int = Field(default=DEFAULT_K, ge=1, description="Posts per topic in top-k mode")
    threshold: float = Field(
        default=DEFAULT_THRESHOLD, ge=-1, le=1, description="Cosine similarity a post needs in nearest mode"
    )
    hour_edges: list[int] = Field(
        default=list(DEFAULT_HOUR_EDGES), description="Local hour bucket edges, from 0 to 24"
    )
    length_edges: list[int] = Field(
        default=list(DEFAULT_LENGTH_EDGES), description="Text length band edges in characters, from 0"
    )
    account: str | None = Field(default=None, description="Only this account's posts")
    min_n: int = Field(default=DEFAULT_MIN_N, ge=1, description="Segments with fewer posts are flagged")
    examples: int = Field(
        default=DEFAULT_EXAMPLES,
        ge=0,
        le=MAX_EXAMPLES,
        description="Example posts per topic segment, most similar first",
    )
    format: Literal["json", "png", "svg"] = Field(
        default="json", description="json for the statistics, png or svg for the figure"
    )
    plot: str | None = Field(
        default=None,
        description="Which split the figure shows: 'topic' or the value of by (default: the first split)",
    )


# Training -------------------------------------------------------------------


class TrainingRequest(Strict):
    metric: str = METRIC_FIELD
    backtest: bool = Field(default=True, description="Run the time-ordered backtest too")


class TrainingOut(BaseModel):
    metric: str
    model_version: str
    n_train: int
    n_calibration: int
    backtested_coverage: dict[str, float]
    backtest: dict[str, object] | None = None
