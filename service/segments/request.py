"""What a segments request asks: the metric, the topics (phrases, alternatives
joined by ``|``), the splits, the statistics' parameters; checked before any
post is read."""

from __future__ import annotations

import typing
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, StringConstraints

from models.embedding import normalise_text
from models.errors import InputError
from models.metrics import DEFAULT_METRIC, check_target
from models.segment_bins import (
    DEFAULT_HOUR_EDGES,
    DEFAULT_LENGTH_EDGES,
    hour_labels,
    length_labels,
)
from models.segments import (
    DEFAULT_ALPHA,
    DEFAULT_CONFIDENCE,
    DEFAULT_MIN_N,
    DEFAULT_RESAMPLES,
    OTHER,
    check_k,
    check_min_n,
    check_threshold,
)
from service.history.match_modes import Match

#: What a one-way split can be made by, besides topics.
By = Literal["hour", "weekday", "link", "media", "length", "account"]
BY_CHOICES: tuple[str, ...] = typing.get_args(By)
#: How posts join topics: each post its nearest phrase, or each phrase its k nearest posts.
Mode = Literal["nearest", "top-k"]
MODES: tuple[str, ...] = typing.get_args(Mode)
#: How a post is matched to a topic: by meaning, words or both (service.segments.word_topics).
MATCHES: tuple[str, ...] = tuple(m.value for m in Match)
TOPIC = "topic"
#: ``by`` written ``label:NAME`` splits on the team's own label NAME (kept at
#: import with ``--label NAME``); posts without it form the NO_LABEL segment.
LABEL_BY = "label:"
NO_LABEL = "no label"
#: ``label:NAME`` as a request's schema declares it.
LabelBy = Annotated[str, StringConstraints(pattern=r"^label:\s*\S", max_length=len(LABEL_BY) + 200)]

#: Cosine similarity a post needs with its nearest phrase to join that topic.
#: all-MiniLM-L6-v2 gives a short phrase and a matching post about 0.3-0.6;
#: unrelated pairs sit mostly below 0.25 (measured on the demo history, where
#: the median best similarity of a post to six one-phrase topics is 0.35).
DEFAULT_THRESHOLD = 0.3
DEFAULT_K = 100
#: Example posts shown per topic segment, and the most that may be asked for.
DEFAULT_EXAMPLES = 3
MAX_EXAMPLES = 20
#: Fewer posts with the metric than this, and no split is worth reading.
MIN_POSTS = 20
MAX_TOPICS = 20
#: Every alternative phrase is embedded, so they count towards the limit too.
MAX_PHRASES = 2 * MAX_TOPICS
MAX_PHRASE_CHARS = 200
PHRASE_SEPARATOR = "|"
PLOT_NAME_CHARS = 30  # longer segment names crowd the figure's axis labels
WEEKDAYS: tuple[str, ...] = ("Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun")

NOTE = (
    "Segments describe this team's own history: a difference between segments is an "
    "association, not a cause (topics, hours and forms are mixed in the posts)."
)

LINK_NAMES = ("no link", "with link")
MEDIA_NAMES = ("no media", "with media")


@dataclass(frozen=True, slots=True, kw_only=True)
class SegmentRequest:
    """What to split, by what, and how. Checked by :func:`segment`."""

    topics: Sequence[str] = ()
    by: str | None = None
    metric: str = DEFAULT_METRIC
    mode: str = "nearest"
    k: int = DEFAULT_K
    threshold: float = DEFAULT_THRESHOLD
    hour_edges: Sequence[int] = DEFAULT_HOUR_EDGES
    length_edges: Sequence[int] = DEFAULT_LENGTH_EDGES
    account: str | None = None
    min_n: int = DEFAULT_MIN_N
    confidence: float = DEFAULT_CONFIDENCE
    n_resamples: int = DEFAULT_RESAMPLES
    alpha: float = DEFAULT_ALPHA
    examples: int = DEFAULT_EXAMPLES
    seed: int = 0
    #: How posts join topics: meaning, words or both (service.segments.word_topics).
    match: str = "meaning"


class Topic(BaseModel):
    """A topic as the answer names it: its phrases as given, tidied."""

    model_config = ConfigDict(frozen=True)

    name: str
    phrases: tuple[str, ...]


def parse_topics(raw: Sequence[str]) -> list[Topic]:
    """Topics from the user's phrases; "a | b" is one topic with two phrases."""
    if isinstance(raw, str):
        raw = [raw]
    if len(raw) > MAX_TOPICS:
        raise InputError(f"{len(raw)} topics; at most {MAX_TOPICS} at a time", field="topics")
    phrases = sum(t.count(PHRASE_SEPARATOR) + 1 for t in raw if isinstance(t, str))
    if phrases > MAX_PHRASES:
        raise InputError(
            f"{phrases} topic phrases, counting each alternative after '{PHRASE_SEPARATOR}'; "
            f"at most {MAX_PHRASES} at a time",
            field="topics",
        )
    topics: list[Topic] = []
    seen: set[str] = set()
    for i, text in enumerate(raw):
        if not isinstance(text, str):
            raise InputError(f"topic {i + 1} is not text", field=f"topics.{i}")
        if len(text) > MAX_PHRASE_CHARS:
            raise InputError(
                f"topic {i + 1} has {len(text)} characters; a topic phrase is short "
                f"(at most {MAX_PHRASE_CHARS}, its alternatives together)",
                field=f"topics.{i}",
            )
        # An empty alternative ("a | | b", "a |") is a slip of the keyboard: left out.
        parts = [p for p in (normalise_text(p) for p in text.split(PHRASE_SEPARATOR)) if p]
        if not parts:
            raise InputError(
                f"topic {i + 1} is an empty phrase",
                field=f"topics.{i}",
                hint="give a few words such as 'flowers in bloom'",
            )
        name = f" {PHRASE_SEPARATOR} ".join(parts)
        key = name.casefold()
        if key == OTHER:
            raise InputError(
                f"{OTHER!r} is the name of the posts no topic catches; choose another phrase",
                field=f"topics.{i}",
            )
        # The same topic given twice (up to case and spacing) is one topic.
        if key not in seen:
            seen.add(key)
            topics.append(Topic(name=name, phrases=tuple(parts)))
    return topics


def parse_edges(text: str, what: str) -> list[int]:
    """Comma-separated whole numbers, as typed on the command line."""
    parts = [p.strip() for p in text.split(",")]
    try:
        return [int(p) for p in parts]
    except ValueError:
        raise InputError(
            f"{what} must be whole numbers separated by commas, such as 0,6,9,12,15,18,21,24; got {text!r}",
            field=what,
        ) from None


def check_hour_edges(edges: Sequence[int]) -> tuple[int, ...]:
    try:
        hour_labels(edges)
    except InputError as exc:
        shown = ",".join(str(e) for e in edges)
        raise InputError(
            f"bad hour edges {shown or '(none)'}: {exc.message}",
            field="hour_edges",
            hint="for example 0,6,9,12,15,18,21,24",
        ) from None
    return tuple(int(e) for e in edges)


def check_length_edges(edges: Sequence[int]) -> tuple[int, ...]:
    try:
        length_labels(edges)
    except InputError as exc:
        shown = ",".join(str(e) for e in edges)
        raise InputError(
            f"bad length edges {shown or '(none)'}: {exc.message}", field="length_edges"
        ) from None
    return tuple(int(e) for e in edges)


def label_of(by: str | None) -> str | None:
    """The label name a ``by`` of ``label:NAME`` asks for; None for the other splits."""
    if by is None or not by.startswith(LABEL_BY):
        return None
    name = by.removeprefix(LABEL_BY).strip()
    if not name:
        raise InputError(
            f"{by!r} names no label; write {LABEL_BY}NAME, e.g. {LABEL_BY}campaign", field="by", value=by
        )
    return name


def check_request(req: SegmentRequest) -> list[Topic]:
    """Every input check, before the store is read."""
    topics = parse_topics(req.topics)
    if req.by is not None and req.by not in BY_CHOICES and label_of(req.by) is None:
        raise InputError(
            f"cannot split by {req.by!r}; choose one of {', '.join(BY_CHOICES)}, or {LABEL_BY}NAME "
            "for a label kept at import",
            field="by",
            value=req.by,
        )
    if not topics and req.by is None:
        raise InputError(
            "nothing to split: give topic phrases, a split (by), or both",
            field="topics",
            hint="e.g. --topic 'flowers in bloom' --topic 'shop offers' or --by hour",
        )
    check_target(req.metric)
    if req.mode not in MODES:
        raise InputError(
            f"unknown mode {req.mode!r}; choose one of {', '.join(MODES)}", field="mode", value=req.mode
        )
    if req.match not in MATCHES:
        raise InputError(
            f"unknown match {req.match!r}; choose one of {', '.join(MATCHES)}", field="match", value=req.match
        )
    check_threshold(req.threshold)
    check_k(req.k)
    if (
        isinstance(req.examples, bool)
        or not isinstance(req.examples, int)
        or not 0 <= req.examples <= MAX_EXAMPLES
    ):
        raise InputError(f"examples must be a whole number from 0 to {MAX_EXAMPLES}", field="examples")
    # The rest of the comparison's parameters are checked where they are used
    # (models.segments.check_params); min_n is needed before that, for warnings.
    check_min_n(req.min_n)
    check_hour_edges(req.hour_edges)
    check_length_edges(req.length_edges)
    return topics
