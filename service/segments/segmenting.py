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
(:class:`service.history.retrieval.Retriever`). A topic may list alternative
phrases separated by ``|`` ("events | tickets | what's on"); its vector is
then the renormalised mean of the phrases' vectors, which catches a theme
better than any one short phrase does.

Differences between segments are associations in this team's own history,
not causes: a topic posted mostly at good hours looks better partly because
of the hours.
"""

from __future__ import annotations

import typing
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import TYPE_CHECKING, Any

import numpy as np

from models.errors import InputError, NotReady
from models.metrics import target_values, without_followers
from models.segment_bins import (
    assign_nearest,
    bucket_hours,
    hour_labels,
    length_band,
    length_labels,
)
from models.segments import OTHER, compare_groups, compare_segments
from models.two_way import two_way
from service.clock import now_utc
from service.datadir import DataDir
from service.history.match_modes import Match
from service.history.view import local_clock
from service.segments.answer import Example, LeftOut, SegmentResult, Split
from service.segments.labels import by_label
from service.segments.peer_examples import peer_examples
from service.segments.request import (
    LINK_NAMES,
    MEDIA_NAMES,
    MIN_POSTS,
    TOPIC,
    WEEKDAYS,
    SegmentRequest,
    Topic,
    check_hour_edges,
    check_length_edges,
    check_request,
    label_of,
)
from service.segments.word_topics import nearest_by, top_k_by, word_scores

# --------------------------------------------------------------------------
# Gathering the posts

if TYPE_CHECKING:
    # pandas loads when a split reads its posts, not with this module.
    import pandas as pd


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
    import pandas as pd

    cutoff = pd.Timestamp(now - timedelta(hours=float(ws.settings.maturity_hours)))
    mature = (frame["posted_at"] <= cutoff).to_numpy()
    keep = has_metric & mature
    left_out = {
        "no_metric": int((~has_metric).sum()),
        "still_gathering": int((has_metric & ~mature).sum()),
        "no_followers": without_followers(frame, req.metric),
    }
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


def _by_labels(ws: DataDir, posts: _Posts, by: str, req: SegmentRequest) -> tuple[np.ndarray, list[str], str]:
    """Per-post segment names, their display order and a title for ``by``."""
    f = posts.frame
    name = label_of(by)
    if name is not None:
        return by_label(ws.store, f, name)
    if by in ("hour", "weekday"):
        hours, days = local_clock(f["posted_at"], f["timezone"])
        if by == "hour":
            edges = check_hour_edges(req.hour_edges)
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
        lab = np.where(f["has_link"].to_numpy(bool), LINK_NAMES[1], LINK_NAMES[0])
        return lab.astype(object), list(LINK_NAMES), "link in the text"
    if by == "media":
        lab = np.where(f["has_media"].to_numpy(bool), MEDIA_NAMES[1], MEDIA_NAMES[0])
        return lab.astype(object), list(MEDIA_NAMES), "media attached"
    if by == "length":
        edges = check_length_edges(req.length_edges)
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


def _by_split(
    ws: DataDir, posts: _Posts, by: str, req: SegmentRequest
) -> tuple[Split, np.ndarray, list[str]]:
    labels, order, title = _by_labels(ws, posts, by, req)
    present = [name for name in order if np.any(labels == name)]
    if len(present) < 2:
        only = present[0] if present else "none"
        # The history, not the request, leaves nothing to compare: the same
        # request splits another history. So "not ready", not bad input.
        raise NotReady(
            f"every post falls in one {by} segment ({only!r}), so there is nothing to compare",
            field="by",
            value=by,
            hint="drop --account for a split by account" if by == "account" else None,
        )
    report = compare_segments(posts.values, labels, order=order, **_stats_kwargs(req))
    split = Split.of(report, by=by, title=title, values=posts.values, labels=labels)
    return split, labels, present


def topic_vectors(ws: DataDir, topics: list[Topic]) -> np.ndarray:
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
            posted_at=typing.cast("pd.Timestamp", f["posted_at"].iat[i]).to_pydatetime(),
            text=str(f["text"].iat[i]),
            similarity=float(sims[i]),
            value=float(posts.values[i]),
        )
        for i in top
    ]


def _nearest_members(
    best: np.ndarray, names: list[str], req: SegmentRequest, warnings: list[str]
) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Nearest mode: each post joins the topic ``best`` gives it (-1: "other";
    by meaning, its most similar topic if it reaches the threshold). The
    members (name -> post rows) and each post's label."""
    members: dict[str, np.ndarray] = {}
    for j, name in enumerate(names):
        idx = np.flatnonzero(best == j)
        if idx.size:
            members[name] = idx
        elif req.match != Match.MEANING:
            warnings.append(
                f"topic {name!r} caught no posts: no post shares more of its words than "
                "another topic's, or only words found in half the posts; try other words"
            )
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
        raise NotReady(
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
    topics: list[Topic],
    pks: np.ndarray,
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
    names = [t.name for t in topics]
    match = Match(req.match)
    hits = (
        ws.retrieval.nearest(topic_vecs, min(req.k, n), allowed_pks=pks)
        if match is Match.MEANING
        else top_k_by(ws, match, topic_vecs, topics, min(req.k, n), pks)
    )
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
    topic_vecs = topic_vectors(ws, topics)
    pks = posts.frame["pk"].to_numpy(dtype=np.int64)
    # Every post's similarity to every topic, scored by the retrieval component
    # (nearest mode needs all of them; both modes show examples from them).
    sims = ws.retrieval.similarities(topic_vecs, pks)
    names = [t.name for t in topics]
    labels: np.ndarray | Mapping[str, np.ndarray]
    nearest = req.mode == "nearest"
    match = Match(req.match)
    # What examples are ordered by: the score a post joined its topic by.
    ranked = sims if match is Match.MEANING else word_scores(ws, topics, pks)
    if nearest:
        if match is Match.MEANING:
            best = assign_nearest(sims, threshold=req.threshold)
        else:
            best, ranked = nearest_by(match, sims, ranked, req.threshold)
        members, labels = _nearest_members(best, names, req, warnings)
        report = compare_segments(posts.values, labels, order=[*names, OTHER], **_stats_kwargs(req))
        title = f"topic ({_JOINED[match].format(t=req.threshold)}; else {OTHER})"
    else:
        members = _top_k_members(ws, topic_vecs, topics, pks, req, warnings)
        labels = members
        report = compare_groups(posts.values, members, **_stats_kwargs(req))
        title = f"topic (the {req.k} posts {_TOP[match]} each phrase; {OTHER}: posts in none)"
    examples = {
        name: _examples(posts, members[name], ranked[:, j], req.examples)
        for j, name in enumerate(names)
        if name in members
    }
    if OTHER in members:
        # The "other" posts closest to any topic: what the threshold just missed.
        examples[OTHER] = _examples(posts, members[OTHER], sims.max(axis=1), req.examples)
    if req.account is None:  # one account's split asks nothing of peers
        peers = peer_examples(
            ws, topic_vecs, names, n=req.examples, threshold=req.threshold if nearest else None
        )
        for name, found in peers.items():
            if name in examples:
                examples[name] = examples[name] + found
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
        match=match.value,
    )
    return split, members


#: How a post joined its topic, as the split's title says it.
_JOINED = {
    Match.MEANING: "nearest phrase, similarity at least {t:g}",
    Match.WORDS: "the phrase whose words it shares most",
    Match.BOTH: "the phrase closest in meaning (similarity at least {t:g}) and words together",
}
_TOP = {
    Match.MEANING: "nearest",
    Match.WORDS: "sharing most words with",
    Match.BOTH: "best by meaning and words for",
}


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
    topics = check_request(req)
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
        by_split, by_labels, by_order = _by_split(ws, posts, req.by, req)
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
    if left_out["no_followers"]:
        warnings.append(
            f"{left_out['no_followers']} posts are left out: no follower count was in force at "
            f"their time, so their {req.metric} is unknown"
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
