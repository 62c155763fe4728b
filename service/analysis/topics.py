"""Topics the history holds, found without phrases, and the map of the posts.

The settled posts' stored vectors are clustered (:mod:`models.topic_clusters`);
each topic is named by its distinctive words, which also work as a
``segments --topic`` phrase, shown with its most central posts, and compared
with the rest by the segment statistics of :mod:`models.segments`.
"""

from __future__ import annotations

from datetime import datetime
from typing import TYPE_CHECKING

import numpy as np
from pydantic import BaseModel, Field

from models.analyst_plots import plot_map
from models.metrics import DEFAULT_METRIC
from models.segments import DEFAULT_MIN_N, SegmentStats, compare_segments
from models.topic_clusters import DEFAULT_K_RANGE, TopicClusterer, log_colour, unique_names
from service.analysis.settled import LeftOut, settled_posts
from service.answers import Instant
from service.datadir import DataDir

CENTRAL = 3
NOTE = (
    "Topics describe this team's own history: a topic doing better than the rest is an "
    "association, not a cause (topics differ in hours, accounts and forms too)."
)
MAP_NOTE = (
    "A PCA projection of the 384-dimensional text vectors onto their two main directions: "
    "near posts are mostly alike in meaning, but distances are approximate."
)

if TYPE_CHECKING:
    import pandas as pd


class CentralPost(BaseModel):
    post_id: str
    text: str
    similarity: float = Field(description="Cosine similarity to the topic's centre")
    value: float


class FoundTopic(SegmentStats):
    """One topic: its name (a usable --topic phrase), words, central posts and statistics."""

    words: list[str] = Field(description="Most distinctive words (class-based TF-IDF), best first")
    share: float = Field(description="Share of the posts")
    central: list[CentralPost]
    post_ids: list[str]


class TopicsAnswer(BaseModel):
    """The answer to a topics request (HTTP, CLI ``--json`` and page alike)."""

    metric: str
    account: str | None
    since: Instant | None
    n_posts: int
    left_out: LeftOut
    k: int
    criterion: str
    silhouettes: dict[int, float] = Field(description="Mean cosine silhouette of each k tried")
    topics: list[FoundTopic]
    kruskal_h: float | None
    kruskal_p: float | None
    note: str = NOTE


class MapPoint(BaseModel):
    post_id: str
    x: float
    y: float
    value: float
    topic: str
    text: str


class MapAnswer(BaseModel):
    metric: str
    projection: str
    explained: list[float] = Field(description="Share of the vectors' variance each axis holds")
    centres: dict[str, tuple[float, float]]
    points: list[MapPoint]
    note: str = MAP_NOTE


def clusters(
    ws: DataDir, metric: str, account: str | None, since: datetime | None, now: datetime | None, seed: int
) -> tuple[pd.DataFrame, np.ndarray, np.ndarray, TopicClusterer, list[str], LeftOut]:
    """The settled posts (frame, metric values, vectors), the fitted clusters,
    their names and what was left out: what every topics answer starts from."""
    posts = settled_posts(ws, metric, account=account, since=since, now=now)
    vectors = ws.store.vectors(list(posts.frame["vector_key"]))
    model = TopicClusterer(seed=seed).fit(vectors)
    texts = [str(t) for t in posts.frame["text"]]
    names = unique_names(model.names(texts))
    return posts.frame, posts.values, vectors, model, names, posts.left_out


def topics(
    ws: DataDir,
    *,
    metric: str = DEFAULT_METRIC,
    account: str | None = None,
    since: datetime | None = None,
    min_n: int = DEFAULT_MIN_N,
    now: datetime | None = None,
    seed: int = 0,
) -> TopicsAnswer:
    frame, values, vectors, model, names, left_out = clusters(ws, metric, account, since, now, seed)
    labels = np.asarray([names[c] for c in model.labels_], dtype=object)
    report = compare_segments(values, labels, order=names, min_n=min_n, seed=seed, metric=metric)
    ids = frame["post_id"].astype(str).to_numpy(object)
    words = model.names([str(t) for t in frame["text"]])
    found = []
    for c, name in enumerate(names):
        idx = np.flatnonzero(model.labels_ == c)
        sims = vectors[idx] @ model.centres_[c]
        top = idx[np.argsort(-sims, kind="stable")[:CENTRAL]]
        stats = report.segment(name)
        found.append(
            FoundTopic(
                **stats.model_dump(exclude={"note"}),
                words=words[c],
                share=idx.size / values.size,
                central=[
                    CentralPost(
                        post_id=str(ids[i]),
                        text=str(frame["text"].iat[i]),
                        similarity=float(vectors[i] @ model.centres_[c]),
                        value=float(values[i]),
                    )
                    for i in top
                ],
                post_ids=[str(ids[i]) for i in idx],
            )
        )
    lo, hi = DEFAULT_K_RANGE
    return TopicsAnswer(
        metric=metric,
        account=account,
        since=since,
        n_posts=int(values.size),
        left_out=left_out,
        k=model.k_,
        criterion=f"k-means on the text vectors; k from {lo} to {hi} chosen by the highest "
        "mean cosine silhouette",
        silhouettes=model.silhouettes_,
        topics=found,
        kruskal_h=report.kruskal_h,
        kruskal_p=report.kruskal_p,
    )


def topic_map(
    ws: DataDir,
    *,
    metric: str = DEFAULT_METRIC,
    account: str | None = None,
    since: datetime | None = None,
    now: datetime | None = None,
    seed: int = 0,
) -> MapAnswer:
    from sklearn.decomposition import PCA

    frame, values, vectors, model, names, _ = clusters(ws, metric, account, since, now, seed)
    pca = PCA(n_components=2, random_state=seed).fit(vectors)
    xy = pca.transform(vectors)
    centres = {
        name: (float(xy[model.labels_ == c, 0].mean()), float(xy[model.labels_ == c, 1].mean()))
        for c, name in enumerate(names)
    }
    points = [
        MapPoint(
            post_id=str(frame["post_id"].iat[i]),
            x=float(xy[i, 0]),
            y=float(xy[i, 1]),
            value=float(values[i]),
            topic=names[int(model.labels_[i])],
            text=str(frame["text"].iat[i]),
        )
        for i in range(values.size)
    ]
    return MapAnswer(
        metric=metric,
        projection="PCA (scikit-learn), first two principal components of the text vectors",
        explained=[float(v) for v in pca.explained_variance_ratio_],
        centres=centres,
        points=points,
    )


def render_map(m: MapAnswer, fmt: str = "png") -> bytes:
    x = np.array([p.x for p in m.points])
    y = np.array([p.y for p in m.points])
    colour = log_colour(np.array([p.value for p in m.points]))
    names = [(n, cx, cy) for n, (cx, cy) in m.centres.items()]
    return plot_map(x, y, colour, names, metric=m.metric.replace("_", " "), caption=m.note, fmt=fmt)


def csv_table(a: TopicsAnswer) -> tuple[list[str], list[list[str]]]:
    """One row per post with its topic."""
    rows = [[pid, t.name] for t in a.topics for pid in t.post_ids]
    return ["post id", "topic"], rows


__all__ = [
    "NOTE",
    "CentralPost",
    "FoundTopic",
    "MapAnswer",
    "MapPoint",
    "TopicsAnswer",
    "clusters",
    "csv_table",
    "render_map",
    "topic_map",
    "topics",
]
