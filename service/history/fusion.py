"""Reciprocal rank fusion (Cormack, Clarke & Büttcher, SIGIR 2009): one
ranking from several, each item scored sum over rankings of 1 / (k + rank),
rank counted from 1, with k = 60 as the paper fixes it.

It needs no common scale between the rankings, which is why it fits cosine
similarities and BM25 scores side by side.
"""

from __future__ import annotations

from collections.abc import Sequence

#: The paper's constant.
RRF_K = 60


def rrf(rankings: Sequence[Sequence[int]], *, k: int = RRF_K) -> list[tuple[int, float]]:
    """(item, fused score) over the items of ``rankings`` (each best first,
    without repeats), best first; ties keep the order of first appearance."""
    score: dict[int, float] = {}
    for ranking in rankings:
        for rank, item in enumerate(ranking, start=1):
            score[item] = score.get(item, 0.0) + 1.0 / (k + rank)
    order = {item: i for i, item in enumerate(dict.fromkeys(x for r in rankings for x in r))}
    return sorted(score.items(), key=lambda kv: (-kv[1], order[kv[0]]))
