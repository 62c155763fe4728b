"""How precedents are matched to a draft: by meaning (the vectors' cosine), by
words (BM25 over the keyword index) or both, fused by reciprocal rank fusion.

Each list is taken deeper than asked (``DEPTH``) before fusing, so a post near
the top of one list and lower in the other can still rise above a post found
by one list only.
"""

from __future__ import annotations

from enum import StrEnum

import numpy as np

from service.history.fusion import rrf
from service.history.retrieval import Hits, Retriever

#: Posts taken from each list before fusing (at least ``k``).
DEPTH = 50


class Match(StrEnum):
    """Which reading of a draft finds its precedents."""

    MEANING = "meaning"
    WORDS = "words"
    BOTH = "both"


def matched(
    retrieval: Retriever,
    vec: np.ndarray,
    text: str,
    k: int,
    *,
    match: Match = Match.MEANING,
    allowed_pks: np.ndarray | None = None,
) -> Hits:
    """(post row id, cosine similarity to the draft) of the ``k`` best posts
    under ``match``, best first; ``allowed_pks`` limits the posts (None: all)."""
    vec = np.asarray(vec, dtype=np.float32).reshape(1, -1)
    if match is Match.MEANING:
        return retrieval.nearest(vec, k, allowed_pks=allowed_pks)[0]
    depth = k if match is Match.WORDS else max(k, DEPTH)
    by_words = [pk for pk, _ in retrieval.by_words(text, depth, allowed_pks=allowed_pks)]
    if match is Match.WORDS:
        order = by_words
    else:
        by_meaning = [pk for pk, _ in retrieval.nearest(vec, depth, allowed_pks=allowed_pks)[0]]
        order = [pk for pk, _ in rrf([by_meaning, by_words])][:k]
    if not order:
        return []
    sims = retrieval.similarities(vec, np.asarray(order, dtype=np.int64))[:, 0]
    return [(pk, float(s)) for pk, s in zip(order, sims, strict=True)]
