"""Segments of the post history: how a metric differs between topics, local
hours, weekdays, forms (link, media, length) and accounts.

A library first: the CLI (``sounding segments``) and the API
(``POST /v1/segments``) both call :func:`segment` and show what it returns,
a :class:`SegmentResult` (the API sends it as it is; the CLI prints it).
The statistics, the reading of each segment in words and the way its
numbers are written live in :mod:`models.segments`, the figure in
:mod:`models.plots`; this module is the use case: it reads the history,
chooses the posts, finds each topic's posts and labels the rest.

Topics need no labels: the user names each topic with a short phrase, the
phrase is embedded with the workspace's embedder (the same model and the
same normalisation as the stored post vectors), and posts are matched by
cosine similarity through the one retrieval component
(:class:`service.retrieval.Retriever`). A topic may list alternative
phrases separated by ``|`` ("events | tickets | what's on"); its vector is
then the renormalised mean of the phrases' vectors, which catches a theme
better than any one short phrase does.

Differences between segments are associations in this team's own history,
not causes: a topic posted mostly at good hours looks better partly because
of the hours.
"""

from __future__ import annotations

import typing
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any, Literal

import numpy as np
import pandas as pd
from pydantic import BaseModel, ConfigDict, Field, PrivateAttr, field_serializer

from models.embedding import normalise_text
from models.errors import InputError, NotReady
from models.metrics import DEFAULT_METRIC, check_target, target_values
from models.plots import FORMATS, plot_segments
from models.segments import (
    DEFAULT_ALPHA,
    DEFAULT_CONFIDENCE,
    DEFAULT_HOUR_EDGES,
    DEFAULT_LENGTH_EDGES,
    DEFAULT_MIN_N,
    DEFAULT_RESAMPLES,
    OTHER,
    Num,
    SegmentReport,
    SegmentStats,
    TwoWayTable,
    assign_nearest,
    bucket_hours,
    check_k,
    check_min_n,
    check_threshold,
    compare_groups,
    compare_segments,
    hour_labels,
    length_band,
    length_labels,
    two_way,
)
from service.datadir import DataDir
from service.history import local_clock
from service.timeparse import now_utc

#: What a one-way split can be made by, besides topics.
By = Literal["hour", "weekday", "link", "media", "length", "account"]
BY_CHOICES: tuple[str, ...] = typing.get_args(By)
#: How posts join topics: each post its nearest phrase, or each phrase its k nearest posts.
Mode = Literal["nearest", "top-k"]
MODES: tuple[str, ...] = typing.get_args(Mode)
TOPIC = "topic"

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

_LINK_NAMES = ("no link", "with link")
_MEDIA_NAMES = ("no media", "with media")


# --------------------------------------------------------------------------
# The request


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
    seen: dict[str, int] = {}
    for i, text in enumerate(raw):
        if not isinstance(text, str):
            raise InputError(f"topic {i + 1} is not text", field=f"topics.{i}")
        parts = [normalise_text(p) for p in text.split(PHRASE_SEPARATOR)]
        if not any(parts):
            raise InputError(
                f"topic {i + 1} is an empty phrase",
                field=f"topics.{i}",
                hint="give a few words such as 'flowers in bloom'",
            )
        if not all(parts):
            raise InputError(
                f"topic {i + 1} ({text.strip()!r}) has an empty alternative around '{PHRASE_SEPARATOR}'",
                field=f"topics.{i}",
            )
        for p in parts:
            if len(p) > MAX_PHRASE_CHARS:
                raise InputError(
                    f"topic {i + 1} has a phrase of {len(p)} characters; a topic phrase is "
                    f"short (at most {MAX_PHRASE_CHARS})",
                    field=f"topics.{i}",
                )
        name = f" {PHRASE_SEPARATOR} ".join(parts)
        key = name.casefold()
        if key == OTHER:
            raise InputError(
                f"{OTHER!r} is the name of the posts no topic catches; choose another phrase",
                field=f"topics.{i}",
            )
        if key in seen:
            raise InputError(f"topic {i + 1} ({name!r}) repeats topic {seen[key] + 1}", field=f"topics.{i}")
        seen[key] = i
        topics.append(Topic(name=name, phrases=tuple(parts)))
    return topics


def parse_edges(text: str, what: str = "--hour-edges") -> list[int]:
    """Comma-separated whole numbers, as typed on the command line."""
    parts = [p.strip() for p in text.split(",")]
    try:
        return [int(p) for p in parts]
    except ValueError:
        raise InputError(
            f"{what} must be whole numbers separated by commas, such as 0,6,9,12,15,18,21,24; got {text!r}",
            field=what,
        ) from None


def _check_hour_edges(edges: Sequence[int]) -> tuple[int, ...]:
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


def _check_length_edges(edges: Sequence[int]) -> tuple[int, ...]:
    try:
        length_labels(edges)
    except InputError as exc:
        shown = ",".join(str(e) for e in edges)
        raise InputError(
            f"bad length edges {shown or '(none)'}: {exc.message}", field="length_edges"
        ) from None
    return tuple(int(e) for e in edges)


def _check(req: SegmentRequest) -> list[Topic]:
    """Every input check, before the store is read."""
    topics = parse_topics(req.topics)
    if req.by is not None and req.by not in BY_CHOICES:
        raise InputError(
            f"cannot split by {req.by!r}; choose one of {', '.join(BY_CHOICES)}", field="by", value=req.by
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
    _check_hour_edges(req.hour_edges)
    _check_length_edges(req.length_edges)
    return topics


# --------------------------------------------------------------------------
# The result


class Example(BaseModel):
    """A post that a topic phrase caught, to show what the phrase means."""

    post_id: str
    account: str
    posted_at: datetime
    text: str
    similarity: float = Field(description="Cosine similarity to the topic's phrase(s)")
    value: Num = Field(description="The post's value of the metric")

    @field_serializer("similarity")
    def _rounded(self, similarity: float) -> float:
        return round(similarity, 4)  # four places tell posts apart; more is noise


class SplitSegment(SegmentStats):
    """One segment of a split, with the posts that show a topic's meaning."""

    examples: list[Example] | None = Field(
        default=None,
        description="Topic splits only: the posts most similar to the phrase; "
        "for 'other', the posts closest to a topic that still missed",
    )


class Split(SegmentReport):
    """One one-way split: the statistics of its segments, what they were
    split by, and (kept out of the JSON) what the figure needs: the values
    and the per-post labels or overlapping groups."""

    by: str = Field(description="topic, or the by of the request")
    title: str
    mode: str | None = None
    threshold: float | None = None
    k: int | None = None
    topics: list[Topic] | None = None
    segments: list[SplitSegment]

    _values: np.ndarray = PrivateAttr(default_factory=lambda: np.zeros(0))
    _labels: np.ndarray | Mapping[str, np.ndarray] = PrivateAttr(default_factory=dict)

    @classmethod
    def of(
        cls,
        report: SegmentReport,
        *,
        by: str,
        title: str,
        values: np.ndarray,
        labels: np.ndarray | Mapping[str, np.ndarray],
        examples: Mapping[str, list[Example]] | None = None,
        mode: str | None = None,
        threshold: float | None = None,
        k: int | None = None,
        topics: list[Topic] | None = None,
    ) -> Split:
        """The split of ``report``; ``examples`` (by segment name) for topics."""
        segments = [
            SplitSegment(
                **seg.model_dump(exclude={"note"}),
                examples=None if examples is None else examples.get(seg.name, []),
            )
            for seg in report.segments
        ]
        split = cls(
            **report.model_dump(exclude={"segments"}),
            segments=segments,
            by=by,
            title=title,
            mode=mode,
            threshold=threshold,
            k=k,
            topics=topics,
        )
        split._values, split._labels = values, labels
        return split

    def segment(self, name: str) -> SplitSegment:
        for seg in self.segments:
            if seg.name == name:
                return seg
        raise KeyError(name)

    @property
    def values(self) -> np.ndarray:
        """The metric of each post in the split."""
        return self._values

    @property
    def labels(self) -> np.ndarray | Mapping[str, np.ndarray]:
        """Each post's segment, or (overlapping segments) each segment's post rows."""
        return self._labels


class LeftOut(BaseModel):
    no_metric: int = Field(description="Posts without the metric")
    still_gathering: int = Field(
        description="Posts whose metrics are not final yet (younger than the maturity window)"
    )


class SegmentResult(BaseModel):
    """The answer to a segments request (HTTP, CLI ``--json`` and page alike)."""

    metric: str
    account: str | None
    n_posts: int
    left_out: LeftOut
    splits: list[Split]
    two_way: TwoWayTable | None = None
    warnings: list[str] = Field(default_factory=list)
    note: str = NOTE

    def split(self, by: str) -> Split:
        for s in self.splits:
            if s.by == by:
                return s
        raise InputError(
            f"there is no {by!r} split here; this answer has {', '.join(s.by for s in self.splits)}",
            field="plot",
            value=by,
        )


# --------------------------------------------------------------------------
# Gathering the posts


@dataclass(slots=True)
class _Posts:
    frame: pd.DataFrame
    values: np.ndarray


def _posts(ws: DataDir, req: SegmentRequest, now: datetime) -> tuple[_Posts, dict[str, int]]:
    frame = ws.store.posts_frame(account=req.account)
    values = target_values(frame, req.metric)
    has_metric = np.isfinite(values)
    # Young posts are still gathering their metric; counting them would pull
    # every segment they sit in down.
    cutoff = pd.Timestamp(now - timedelta(hours=float(ws.settings.maturity_hours)))
    mature = (frame["posted_at"] <= cutoff).to_numpy()
    keep = has_metric & mature
    left_out = {"no_metric": int((~has_metric).sum()), "still_gathering": int((has_metric & ~mature).sum())}
    n = int(keep.sum())
    if n < MIN_POSTS:
        where = f" of account {req.account}" if req.account else ""
        young = (
            f" ({left_out['still_gathering']} more are younger than "
            f"{ws.settings.maturity_hours:g} h and left out)"
            if left_out["still_gathering"]
            else ""
        )
        raise NotReady(
            f"only {n} posts{where} have {req.metric}{young}; segments need at least {MIN_POSTS}",
            field="metric",
            hint="import more history",
        )
    kept = frame.loc[keep].reset_index(drop=True)
    return _Posts(kept, values[keep]), left_out


def _by_labels(posts: _Posts, by: str, req: SegmentRequest) -> tuple[np.ndarray, list[str], str]:
    """Per-post labels, their display order and a title for ``by``."""
    f = posts.frame
    if by in ("hour", "weekday"):
        hours, days = local_clock(f["posted_at"], f["timezone"])
        if by == "hour":
            edges = _check_hour_edges(req.hour_edges)
            return (
                bucket_hours(hours, edges),
                hour_labels(edges),
                "local hour of posting (each account's own time zone)",
            )
        return (
            np.asarray([WEEKDAYS[d] for d in days], dtype=object),
            list(WEEKDAYS),
            "local weekday of posting",
        )
    if by == "link":
        lab = np.where(f["has_link"].to_numpy(bool), _LINK_NAMES[1], _LINK_NAMES[0])
        return lab.astype(object), list(_LINK_NAMES), "link in the text"
    if by == "media":
        lab = np.where(f["has_media"].to_numpy(bool), _MEDIA_NAMES[1], _MEDIA_NAMES[0])
        return lab.astype(object), list(_MEDIA_NAMES), "media attached"
    if by == "length":
        edges = _check_length_edges(req.length_edges)
        lengths = np.array([len(t) for t in f["text"]], dtype=np.int64)
        # Keep texts past the last edge in the last band rather than failing.
        lengths = np.minimum(lengths, edges[-1] - 1)
        return length_band(lengths, edges), length_labels(edges), "text length (characters)"
    accounts = f["account"].astype(str).to_numpy(object)
    return accounts, sorted(set(accounts)), "account"


# --------------------------------------------------------------------------
# Building the splits


def _stats_kwargs(req: SegmentRequest) -> dict[str, Any]:
    return {
        "min_n": req.min_n,
        "confidence": req.confidence,
        "n_resamples": req.n_resamples,
        "seed": req.seed,
        "alpha": req.alpha,
        "metric": req.metric,
    }


def _by_split(posts: _Posts, by: str, req: SegmentRequest) -> tuple[Split, np.ndarray, list[str]]:
    labels, order, title = _by_labels(posts, by, req)
    present = [name for name in order if np.any(labels == name)]
    if len(present) < 2:
        only = present[0] if present else "none"
        raise InputError(
            f"every post falls in one {by} segment ({only!r}), so there is nothing to compare",
            field="by",
            value=by,
            hint="drop --account for a split by account" if by == "account" else None,
        )
    report = compare_segments(posts.values, labels, order=order, **_stats_kwargs(req))
    split = Split.of(report, by=by, title=title, values=posts.values, labels=labels)
    return split, labels, present


def _topic_vectors(ws: DataDir, topics: list[Topic]) -> np.ndarray:
    phrases = [p for t in topics for p in t.phrases]
    vecs = ws.embedder.encode(phrases)  # one call: every phrase embedded once
    out, i = [], 0
    for t in topics:
        block = vecs[i : i + len(t.phrases)]
        i += len(t.phrases)
        # The mean of unit vectors is shorter than 1; renormalise so dot
        # products stay cosines, as the post vectors' are.
        c = block.mean(axis=0)
        out.append(c / np.linalg.norm(c))
    return np.asarray(out, dtype=np.float32)


def _examples(posts: _Posts, idx: np.ndarray, sims: np.ndarray, n: int) -> list[Example]:
    if n == 0 or idx.size == 0:
        return []
    top = idx[np.argsort(-sims[idx], kind="stable")[:n]]
    f = posts.frame
    return [
        Example(
            post_id=str(f["post_id"].iat[i]),
            account=str(f["account"].iat[i]),
            posted_at=typing.cast(pd.Timestamp, f["posted_at"].iat[i]).to_pydatetime(),
            text=str(f["text"].iat[i]),
            similarity=float(sims[i]),
            value=float(posts.values[i]),
        )
        for i in top
    ]


def _nearest_members(
    sims: np.ndarray, names: list[str], req: SegmentRequest, warnings: list[str]
) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Nearest mode: each post joins its most similar topic if it reaches the
    threshold, else "other". The members (name -> post rows) and each post's label."""
    best = assign_nearest(sims, threshold=req.threshold)
    members: dict[str, np.ndarray] = {}
    for j, name in enumerate(names):
        idx = np.flatnonzero(best == j)
        if idx.size:
            members[name] = idx
        else:
            warnings.append(
                f"topic {name!r} caught no posts at threshold {req.threshold:g}: no post is "
                "closer to it than to another topic and above the threshold; try another "
                "phrase or a lower threshold"
            )
    if (best < 0).any():
        members[OTHER] = np.flatnonzero(best < 0)
    if len(members) < 2:
        only = next(iter(members), OTHER)
        raise InputError(
            f"every post fell in one topic segment ({only!r}), so there is nothing to compare",
            field="topics",
            hint="add a topic, or raise the threshold"
            if only != OTHER
            else "lower the threshold or try other phrases",
        )
    labels = np.asarray([names[b] if b >= 0 else OTHER for b in best], dtype=object)
    return members, labels


def _top_k_members(
    ws: DataDir,
    topic_vecs: np.ndarray,
    pks: np.ndarray,
    names: list[str],
    req: SegmentRequest,
    warnings: list[str],
) -> dict[str, np.ndarray]:
    """Top-k mode: each topic takes its k nearest posts (a post may join several);
    "other" holds the posts no topic took."""
    n = len(pks)
    if req.k >= n:
        warnings.append(
            f"k = {req.k} is not below the {n} posts: every topic takes every "
            "post, so the topics cannot differ; use a smaller k"
        )
    hits = ws.retrieval.nearest(topic_vecs, min(req.k, n), allowed_pks=pks)
    row_of = {int(pk): i for i, pk in enumerate(pks)}
    members = {
        name: np.sort(np.array([row_of[pk] for pk, _ in found], dtype=np.int64))
        for name, found in zip(names, hits, strict=True)
    }
    caught = np.zeros(n, dtype=bool)
    for idx in members.values():
        caught[idx] = True
    if (~caught).any():
        members[OTHER] = np.flatnonzero(~caught)
    if len(members) < 2:
        raise InputError(
            "one topic whose k nearest posts are every post leaves nothing to compare",
            field="k",
            hint="use a smaller k",
        )
    if len(names) > 1:
        warnings.append(
            "in top-k mode a post may sit in several topics, so segments "
            "overlap and there is no Kruskal–Wallis test across them"
        )
    return members


def _topic_split(
    ws: DataDir, posts: _Posts, topics: list[Topic], req: SegmentRequest, warnings: list[str]
) -> tuple[Split, dict[str, np.ndarray]]:
    """The topic split and its members (name -> post rows), which may
    overlap in top-k mode."""
    topic_vecs = _topic_vectors(ws, topics)
    pks = posts.frame["pk"].to_numpy(dtype=np.int64)
    # Every post's similarity to every topic, scored by the retrieval component
    # (nearest mode needs all of them; both modes show examples from them).
    sims = ws.retrieval.similarities(topic_vecs, pks)
    names = [t.name for t in topics]
    labels: np.ndarray | Mapping[str, np.ndarray]
    nearest = req.mode == "nearest"
    if nearest:
        members, labels = _nearest_members(sims, names, req, warnings)
        report = compare_segments(posts.values, labels, order=[*names, OTHER], **_stats_kwargs(req))
        title = f"topic (nearest phrase, similarity at least {req.threshold:g}; else {OTHER})"
    else:
        members = _top_k_members(ws, topic_vecs, pks, names, req, warnings)
        labels = members
        report = compare_groups(posts.values, members, **_stats_kwargs(req))
        title = f"topic (the {req.k} posts nearest each phrase; {OTHER}: posts in none)"
    examples = {
        name: _examples(posts, members[name], sims[:, j], req.examples)
        for j, name in enumerate(names)
        if name in members
    }
    if OTHER in members:
        # The "other" posts closest to any topic: what the threshold just missed.
        examples[OTHER] = _examples(posts, members[OTHER], sims.max(axis=1), req.examples)
    split = Split.of(
        report,
        by=TOPIC,
        title=title,
        values=posts.values,
        labels=labels,
        examples=examples,
        mode=req.mode,
        threshold=req.threshold if nearest else None,
        k=None if nearest else req.k,
        topics=topics,
    )
    return split, members


def _small_warnings(split: Split, min_n: int) -> list[str]:
    what = "topic" if split.by == TOPIC else f"{split.by} segment"
    return [
        f"{what} {seg.name!r} has only {seg.n} post{'s' if seg.n != 1 else ''} (fewer than "
        f"{min_n}): too few to trust its median or its test"
        for seg in split.segments
        if seg.too_small
    ]


def segment(ws: DataDir, req: SegmentRequest, *, now: datetime | None = None) -> SegmentResult:
    """Split the store's mature posts by topic, by ``req.by``, or both (then
    also the two-way table topic x by)."""
    topics = _check(req)
    posts, left_out = _posts(ws, req, now or now_utc())
    warnings: list[str] = []
    splits: list[Split] = []
    members: dict[str, np.ndarray] | None = None
    if topics:
        topic_split, members = _topic_split(ws, posts, topics, req, warnings)
        splits.append(topic_split)
    by_labels: np.ndarray | None = None
    by_order: list[str] = []
    if req.by is not None:
        by_split, by_labels, by_order = _by_split(posts, req.by, req)
        splits.append(by_split)
    for s in splits:
        warnings.extend(_small_warnings(s, req.min_n))

    table = None
    if members is not None and by_labels is not None and req.by is not None:
        # One row per (topic, post) pair, so top-k topics that share posts
        # each count them; in nearest mode this is one row per post.
        rows = np.concatenate([np.full(idx.size, name, dtype=object) for name, idx in members.items()])
        picks = np.concatenate(list(members.values()))
        table = two_way(
            posts.values[picks],
            rows,
            by_labels[picks],
            row_by=TOPIC,
            col_by=req.by,
            min_n=req.min_n,
            row_order=list(members),
            col_order=by_order,
        )
        small = int(table.too_small.sum())
        if small:
            warnings.append(
                f"{small} of {table.n.size} cells of the topic x {req.by} table have fewer "
                f"than {req.min_n} posts: read their medians as rough"
            )
    if left_out["still_gathering"]:
        warnings.append(
            f"{left_out['still_gathering']} posts younger than "
            f"{ws.settings.maturity_hours:g} h are left out: their {req.metric} "
            "is still growing"
        )
    return SegmentResult(
        metric=req.metric,
        account=req.account,
        n_posts=int(posts.values.size),
        left_out=LeftOut(**left_out),
        splits=splits,
        two_way=table,
        warnings=warnings,
    )


def render(result: SegmentResult, *, by: str | None = None, fmt: str = "png") -> bytes:
    """The figure of one split (the first one unless ``by`` names another)."""
    fmt = fmt.lower()
    if fmt not in FORMATS:
        raise InputError(f"figure format must be one of {', '.join(FORMATS)}", field="format", value=fmt)
    split = result.split(by) if by else result.splits[0]
    names = plot_names([seg.name for seg in split.segments])
    shown = split.model_copy(
        update={"segments": [seg.model_copy(update={"name": names[seg.name]}) for seg in split.segments]}
    )
    labels: np.ndarray | dict[str, np.ndarray]
    if isinstance(split.labels, Mapping):
        labels = {names[k]: v for k, v in split.labels.items()}
    else:
        labels = np.asarray([names[x] for x in split.labels], dtype=object)
    return plot_segments(shown, split.values, labels, metric=result.metric, fmt=fmt)


def plot_names(names: Sequence[str], width: int = PLOT_NAME_CHARS) -> dict[str, str]:
    """Short, unique figure labels: a topic of several phrases shows its
    first phrase and how many more ("flowers in bloom (+5)"); the full
    names stay in the JSON and the table."""
    out: dict[str, str] = {}
    for name in names:
        parts = name.split(f" {PHRASE_SEPARATOR} ")
        short = name if len(parts) == 1 else f"{parts[0]} (+{len(parts) - 1})"
        if len(short) > width:
            short = short[: width - 1].rstrip() + "…"
        base, i = short, 2
        while short in out.values():
            short, i = f"{base} #{i}", i + 1
        out[name] = short
    return out


__all__ = [
    "BY_CHOICES",
    "DEFAULT_EXAMPLES",
    "DEFAULT_K",
    "DEFAULT_THRESHOLD",
    "MAX_EXAMPLES",
    "MIN_POSTS",
    "MODES",
    "NOTE",
    "TOPIC",
    "By",
    "Example",
    "LeftOut",
    "Mode",
    "SegmentRequest",
    "SegmentResult",
    "Split",
    "SplitSegment",
    "Topic",
    "parse_edges",
    "parse_topics",
    "plot_names",
    "render",
    "segment",
]
