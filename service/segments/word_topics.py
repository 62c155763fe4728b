"""Posts assigned to plain-word topics by the words of the topics' phrases
(BM25 over the keyword index), or by meaning and words together.

The rules (README, "Segments by topic"):

- ``words``: each post's score for a topic is the BM25 of the topic's words
  (all its alternative phrases together) on the post; the post joins the
  topic where it scores highest, and "other" when it scores below
  ``MIN_SCORE`` on every topic: a post that shares only words found in half
  the posts or more (BM25's idf floored near zero, as FTS5 does) or none at
  all is matched by no topic's words;
- ``both``: each post ranks the topics by meaning (those whose cosine reaches
  the threshold) and by words (those scoring at least ``MIN_SCORE``); the two
  rankings are fused by reciprocal rank fusion (``service.history.fusion``),
  ties going to the meaning ranking's order, and the post joins the best
  fused topic; a post in neither ranking goes to "other".

In top-k mode each topic takes its k best posts by words (BM25) or by the
fused ranking (``service.history.match_modes``), as precedents are found.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from service.datadir import DataDir
from service.history.fusion import rrf
from service.history.match_modes import Match, matched
from service.history.retrieval import Hits
from service.segments.request import Topic

#: The least BM25 score that makes a post match a topic by words: any word of
#: the phrase in fewer than half the posts gives more than this.
MIN_SCORE = 1e-3


def topic_text(topic: Topic) -> str:
    """The words a topic is matched by: all its alternative phrases."""
    return " ".join(topic.phrases)


def word_scores(ws: DataDir, topics: Sequence[Topic], pks: np.ndarray) -> np.ndarray:
    """BM25 of each topic's words on each post (a row per post of ``pks``, a
    column per topic); 0 where the post shares none of them."""
    row_of = {int(pk): i for i, pk in enumerate(pks)}
    out = np.zeros((len(pks), len(topics)), dtype=np.float64)
    for j, t in enumerate(topics):
        for pk, score in ws.retrieval.by_words(topic_text(t), len(pks), allowed_pks=pks):
            out[row_of[pk], j] = score
    return out


def nearest_by(
    match: Match, sims: np.ndarray, scores: np.ndarray, threshold: float
) -> tuple[np.ndarray, np.ndarray]:
    """Each post's topic under ``match`` words or both (-1: "other"), and the
    score it joined by (BM25, or the fused rank score), posts by topics."""
    if match is Match.WORDS:
        best = np.where(scores.max(axis=1) >= MIN_SCORE, scores.argmax(axis=1), -1)
        return best, scores
    fused = np.zeros_like(scores)
    best = np.full(len(scores), -1, dtype=np.int64)
    for i in range(len(scores)):
        by_meaning = [int(j) for j in np.argsort(-sims[i], kind="stable") if sims[i, j] >= threshold]
        by_words = [int(j) for j in np.argsort(-scores[i], kind="stable") if scores[i, j] >= MIN_SCORE]
        ranked = rrf([by_meaning, by_words])
        for j, s in ranked:
            fused[i, j] = s
        if ranked:
            best[i] = ranked[0][0]
    return best, fused


def top_k_by(
    ws: DataDir, match: Match, topic_vecs: np.ndarray, topics: Sequence[Topic], k: int, pks: np.ndarray
) -> list[Hits]:
    """Each topic's ``k`` best posts under ``match`` (words or both)."""
    return [
        matched(ws.retrieval, vec, topic_text(t), k, match=match, allowed_pks=pks)
        for vec, t in zip(topic_vecs, topics, strict=True)
    ]
