"""Pydantic request models and error bodies of the HTTP API, and its answers.

Kept apart from the SQLAlchemy tables: these are the public contract. Each
answer is defined once, as the pydantic result type of the module that
produces it (``service.forecast.forecaster.Forecast``, ``service.review.hours.HoursReport``,
...); it is re-exported here so the API and the client name one set of
models. Only the answers built in the routers themselves (forget, training)
and the segments answers are defined below.
"""

from __future__ import annotations

from datetime import date, datetime
from typing import Annotated, Any, Literal, TypeVar
from zoneinfo import available_timezones

from pydantic import AfterValidator, BaseModel, ConfigDict, Field, JsonValue, ValidationInfo, field_validator

from models.metrics import DEFAULT_COVERAGE, DEFAULT_METRIC, TARGETS
from models.segment_bins import DEFAULT_HOUR_EDGES, DEFAULT_LENGTH_EDGES, OPEN_END
from models.segments import DEFAULT_MIN_N
from service.account_choice import AccountChoice, AccountFit
from service.analysis.team import TeamOverview
from service.answers import Calibration, Coverage, LiveCoverage
from service.api.textcheck import utf8_only
from service.clock import RANGE_TEXT, YEAR_PATTERN, year_in_range
from service.forecast.answer import Contributions, Forecast, Forecasts, GroupEffect
from service.health import EmbeddingState, Health, IndexState, SearchState
from service.history.match_modes import Match
from service.history.precedents import Precedent, Precedents, WeightedPrecedent
from service.history.repeats import Repeat
from service.ingest.answers import ColumnUse, ImportFix, ImportPreview, ImportSummary, PreviewRow, RowProblem
from service.limits import SPACE_CLASS, VISIBLE_PATTERN
from service.review.hour_support import DEFAULT_MIN_POSTS
from service.review.hours import HoursReport, Slot
from service.review.wordings import MAX_VARIANTS, Variant, VariantsReport
from service.segments.answer import SegmentResult as SegmentResult  # the answer, used as it is
from service.segments.request import (
    DEFAULT_EXAMPLES,
    DEFAULT_K,
    DEFAULT_THRESHOLD,
    MAX_EXAMPLES,
    MAX_PHRASE_CHARS,
    MAX_PHRASES,
    MAX_TOPICS,
    By,
    LabelBy,
    Mode,
)
from service.storage.accounts import AccountInfo
from service.storage.followers import MAX_FOLLOWERS
from service.track.answers import TrackRecord

# The answers re-exported from the modules that define them (the request models
# below are public too; this list only keeps the re-exports explicit).
__all__ = [
    "AccountChoice",
    "AccountFit",
    "AccountInfo",
    "Calibration",
    "ColumnUse",
    "Contributions",
    "EmbeddingState",
    "Forecast",
    "Forecasts",
    "GroupEffect",
    "Health",
    "HoursReport",
    "ImportFix",
    "ImportPreview",
    "ImportSummary",
    "IndexState",
    "LiveCoverage",
    "Precedent",
    "Precedents",
    "PreviewRow",
    "Repeat",
    "RowProblem",
    "SearchState",
    "Slot",
    "TeamOverview",
    "TrackRecord",
    "Variant",
    "VariantsReport",
    "WeightedPrecedent",
]


_When = TypeVar("_When", datetime, date)


def _in_range(value: _When) -> _When:
    """A time or date inside the accepted range (service.clock), by its year as
    written: exactly what the schema's pattern states."""
    if not year_in_range(value):
        raise ValueError(f"{value.isoformat()} is outside the accepted range, {RANGE_TEXT}")
    return value


#: A draft's text is more than whitespace (``service.limits``).
_VISIBLE: dict[str, JsonValue] = {"pattern": VISIBLE_PATTERN}
DraftText = Annotated[str, Field(min_length=1, json_schema_extra=_VISIBLE)]

#: One topic phrase ("a | b": one topic, two alternatives), as
#: ``service.segments.request.parse_topics`` reads it: some text beside the
#: separators, short, and not the name of the posts no topic catches.
TopicPhrase = Annotated[
    str,
    Field(
        min_length=1,
        max_length=MAX_PHRASE_CHARS,
        json_schema_extra={
            "pattern": f"[^{SPACE_CLASS}|]",
            "not": {"pattern": f"^[{SPACE_CLASS}|]*[Oo][Tt][Hh][Ee][Rr][{SPACE_CLASS}|]*$"},
        },
    ),
]
#: Split edges: each once, in any order (``models.segment_bins``).
HourEdge = Annotated[int, Field(ge=0, le=24)]
LengthEdge = Annotated[int, Field(ge=0, le=OPEN_END)]
_HOUR_EDGES: dict[str, JsonValue] = {
    "minItems": 2,
    "uniqueItems": True,
    "allOf": [{"contains": {"const": 0}}, {"contains": {"const": 24}}],
}
_LENGTH_EDGES: dict[str, JsonValue] = {"minItems": 2, "uniqueItems": True, "contains": {"const": 0}}

_YEARS = Field(json_schema_extra={"pattern": YEAR_PATTERN})
InRangeTime = Annotated[datetime, AfterValidator(_in_range), _YEARS]
InRangeDay = Annotated[date, AfterValidator(_in_range), _YEARS]


def planned_at_field(whose_zone: str) -> Any:
    """A draft's planned time. The schema states RFC 3339 with its offset in
    the accepted years; the server also reads the other ISO 8601 layouts, a
    naive time in the account's zone among them (``service.clock``)."""
    return Field(
        default=None,
        description="RFC 3339 time, e.g. 2026-12-03T12:30:00+01:00. Other ISO 8601 layouts are read "
        f"too; a time without an offset is read in {whose_zone} zone. Default: now.",
        examples=["2026-12-03T12:30:00+01:00"],
        json_schema_extra={"format": "date-time", "pattern": YEAR_PATTERN},
    )


class Strict(BaseModel):
    model_config = ConfigDict(extra="forbid")

    # Every string of every request is text that encodes (textcheck).
    _utf8 = field_validator("*", mode="before")(utf8_only)

    @field_validator("*", mode="before")
    @classmethod
    def _no_flag_for_a_number(cls, value: Any, info: ValidationInfo) -> Any:
        # JSON true/false is not a number, though pydantic's lax mode reads it
        # as 1/0: the schema says "integer" or "number", so it is refused.
        if isinstance(value, bool) and info.field_name is not None:
            annotation = cls.model_fields[info.field_name].annotation
            if annotation in (int, float, int | None, float | None):
                raise ValueError("must be a number, not true or false")
        return value


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


class PrecedentsRequest(Strict):
    text: DraftText = Field(description="The draft")
    account: str | None = Field(default=None, description="Only this account's posts")
    k: int = Field(default=10, ge=1, le=100)
    since: InRangeTime | None = None
    until: InRangeTime | None = None
    match: Match = Field(
        default=Match.MEANING,
        description="meaning: by the text's embedding; words: by shared words (BM25); "
        "both: the two rankings fused by reciprocal rank fusion",
    )


#: The IANA zone names this machine knows (the tz database of tzdata or the system).
ZONE_NAMES: list[JsonValue] = [*sorted(available_timezones())]


class AccountChange(Strict):
    """What to set on an account (created when new); fields left out stay as they are."""

    display_name: str | None = Field(default=None, max_length=400)
    timezone: str | None = Field(
        default=None,
        description="IANA zone its local times are read in",
        json_schema_extra={"enum": ZONE_NAMES},
    )
    reference: bool | None = Field(
        default=None,
        description="true: a peer's account, searched but never measured or learnt from; "
        "false: one of the team's accounts",
    )
    followers: int | None = Field(
        default=None, ge=0, le=MAX_FOLLOWERS, description="The account's follower count from `since` on"
    )
    since: InRangeTime | None = Field(
        default=None, description="When the follower count was taken (default: now)"
    )


class ForgetOut(BaseModel):
    deleted: int = Field(description="Posts deleted, with their snapshots and unused vectors")
    posts: int = Field(description="Posts left in the store")


# Forecasts ------------------------------------------------------------------

METRIC_FIELD = Field(
    default=DEFAULT_METRIC.value,
    description="One of: " + ", ".join(TARGETS),
    json_schema_extra={"enum": list(TARGETS)},
)
#: The coverage a request may ask for (one definition for every endpoint; its
#: range is the ``Coverage`` type's).
COVERAGE_FIELD = Field(default=DEFAULT_COVERAGE, description="Nominal coverage of the interval")


#: How near-repeats are found (service.history.repeats).
REPEAT_MATCH_FIELD = Field(
    default=Match.MEANING,
    description="How near-repeats are found. meaning: by the text's embedding; words: by shared "
    "words (BM25, the share of an earlier post's words the draft repeats); both: either",
)


class DraftIn(Strict):
    text: DraftText = Field(description="The draft's text")
    account: str = Field(min_length=1, description="Handle of the account that would post it")
    planned_at: str | None = planned_at_field("the account's")
    draft_id: str | None = None
    has_media: bool = Field(default=False, description="An image or video goes with the text")


class ForecastRequest(DraftIn):
    metric: str = METRIC_FIELD
    coverage: Coverage = COVERAGE_FIELD
    record: bool = Field(default=True, description="Keep the forecast in the track record")
    match: Match = REPEAT_MATCH_FIELD


class ForecastBatchRequest(Strict):
    drafts: list[DraftIn] = Field(min_length=1)
    metric: str = METRIC_FIELD
    coverage: Coverage = COVERAGE_FIELD
    record: bool = Field(default=True, description="Keep the forecasts in the track record")
    match: Match = REPEAT_MATCH_FIELD


class AccountChoiceRequest(Strict):
    text: DraftText = Field(description="The draft's text")
    accounts: list[Annotated[str, Field(pattern=r"\S")]] = Field(
        default=["all"],
        min_length=1,
        description="Handles of the accounts to rank, or ['all'] for every account of the store",
        examples=[["all"], ["loomhaven", "loomhaven_events"]],
    )
    planned_at: str | None = planned_at_field("each account's own")
    has_media: bool = Field(default=False, description="An image or video goes with the text")
    metric: str = METRIC_FIELD
    coverage: Coverage = COVERAGE_FIELD
    match: Match = REPEAT_MATCH_FIELD


# Draft review: best hours and variants (service.review) ----------------------


class HoursRequest(Strict):
    text: DraftText = Field(description="The draft's text")
    account: str = Field(min_length=1, description="Handle of the account that would post it")
    day: InRangeDay | None = Field(
        default=None,
        description="Local calendar day (ISO 8601 date) in the account's zone; default: tomorrow there",
        examples=["2026-12-03"],
    )
    week: bool = Field(default=False, description="Seven days from `day`, hour by hour")
    metric: str = METRIC_FIELD
    coverage: Coverage = COVERAGE_FIELD
    top: int = Field(default=3, ge=1, le=168, description="How many of the best hours to list")
    has_media: bool = Field(default=False, description="An image or video goes with the text")
    min_posts: int = Field(
        default=DEFAULT_MIN_POSTS,
        ge=0,
        le=10_000,
        description="Hours (and weekdays in a week) with fewer of the account's posts are marked "
        "few_posts and never called best",
    )
    match: Match = REPEAT_MATCH_FIELD


class VariantsRequest(Strict):
    texts: list[DraftText] = Field(
        min_length=2,
        description=f"Two to {MAX_VARIANTS} phrasings of one draft (more answers 413, like the other limits)",
        # Stated in the schema, answered by the server's own limit (413).
        json_schema_extra={"maxItems": MAX_VARIANTS},
    )
    account: str = Field(min_length=1)
    planned_at: str | None = planned_at_field("the account's")
    metric: str = METRIC_FIELD
    coverage: Coverage = COVERAGE_FIELD
    has_media: bool = Field(default=False, description="An image or video goes with every variant")
    match: Match = REPEAT_MATCH_FIELD


# Segments -------------------------------------------------------------------


class SegmentsRequest(Strict):
    # A request needs something to split on: topic phrases, a split, or both.
    model_config = ConfigDict(
        extra="forbid",
        json_schema_extra={
            "anyOf": [
                {"required": ["by"], "properties": {"by": {"not": {"type": "null"}}}},
                {"required": ["topics"], "properties": {"topics": {"minItems": 1}}},
            ]
        },
    )

    topics: list[TopicPhrase] = Field(
        default_factory=list,
        max_length=MAX_TOPICS,
        description="Topic phrases, e.g. 'flowers in bloom'. 'a | b' is one topic with two "
        "alternative phrases (their vectors are averaged). No labels are needed. Empty "
        "alternatives are left out and a topic given twice (up to case) counts once; at most "
        f"{MAX_PHRASES} alternatives in all (more answers 422).",
        examples=[["flowers in bloom", "shop offers | membership"]],
    )
    by: By | LabelBy | None = Field(
        default=None,
        description="A one-way split by local hour bucket, local weekday, link in the text, "
        "media attached, text length band or account, or `label:NAME` by the team's own label "
        "NAME kept at import (posts without it: 'no label'). With topics too, the answer adds "
        "the two-way table topic x by.",
    )
    metric: str = METRIC_FIELD
    mode: Mode = Field(
        default="nearest",
        description="nearest: each post joins its most similar topic if the cosine similarity "
        "reaches threshold, else 'other'. top-k: each topic takes its k most similar posts.",
    )
    match: Match = Field(
        default=Match.MEANING,
        description="How a post joins a topic. meaning: by the phrase's embedding; words: by the "
        "phrase's words it shares (BM25); both: the two rankings fused by reciprocal rank fusion",
    )
    k: int = Field(default=DEFAULT_K, ge=1, description="Posts per topic in top-k mode")
    threshold: float = Field(
        default=DEFAULT_THRESHOLD, ge=-1, le=1, description="Cosine similarity a post needs in nearest mode"
    )
    hour_edges: list[HourEdge] = Field(
        default=list(DEFAULT_HOUR_EDGES),
        description="Local hour bucket edges: whole hours, 0 and 24 among them",
        json_schema_extra=_HOUR_EDGES,
    )
    length_edges: list[LengthEdge] = Field(
        default=list(DEFAULT_LENGTH_EDGES),
        description="Text length band edges in characters, 0 among them; longer texts than the "
        "last edge form a last band",
        json_schema_extra=_LENGTH_EDGES,
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
