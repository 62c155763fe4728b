"""Reference accounts' posts shown beside a topic's examples: what peers
post on it. They are shown, marked, and counted in no segment: a peer's
metrics are never read."""

from __future__ import annotations

import typing
from typing import TYPE_CHECKING

import numpy as np

from models.segment_bins import assign_nearest
from service.datadir import DataDir
from service.segments.answer import Example

if TYPE_CHECKING:
    import pandas as pd


def peer_examples(
    ws: DataDir,
    topic_vecs: np.ndarray,
    names: list[str],
    *,
    n: int,
    threshold: float | None,
) -> dict[str, list[Example]]:
    """Up to ``n`` reference posts per topic, most similar first: in nearest
    mode (``threshold`` given) those whose nearest topic it is, at or above
    the threshold, as the team's posts are assigned; in top-k mode the most
    similar to its phrase."""
    if n == 0:
        return {}
    frame = ws.store.posts_frame(reference=True)
    if not len(frame):
        return {}
    sims = ws.retrieval.similarities(topic_vecs, frame["pk"].to_numpy(dtype=np.int64))
    best = assign_nearest(sims, threshold=threshold) if threshold is not None else None
    out: dict[str, list[Example]] = {}
    for j, name in enumerate(names):
        idx = np.flatnonzero(best == j) if best is not None else np.arange(len(frame))
        top = idx[np.argsort(-sims[idx, j], kind="stable")[:n]]
        out[name] = [_example(frame, int(i), float(sims[i, j])) for i in top]
    return out


def _example(f: pd.DataFrame, i: int, similarity: float) -> Example:
    return Example(
        post_id=str(f["post_id"].iat[i]),
        account=str(f["account"].iat[i]),
        posted_at=typing.cast("pd.Timestamp", f["posted_at"].iat[i]).to_pydatetime(),
        text=str(f["text"].iat[i]),
        similarity=similarity,
        value=None,
        reference=True,
    )
