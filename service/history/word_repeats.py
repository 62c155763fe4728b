"""Near-repeats found by words: an earlier post whose weighted words a draft
repeats, whatever the sentence model makes of the two phrasings.

The rule (README, "Near-repeats by words"): a post of the window is a
near-repeat of the draft when

- the draft's words score on the post, by BM25 (``service.storage.keywords``),
  at least ``repeat_words_share`` of what the post's own words score on it
  (its self-score, the most any query can score there): the draft repeats
  that share of the post's words, each weighted by its rarity and its
  repetitions as BM25 weighs them; and
- the two share at least ``MIN_SHARED`` distinct terms, so that one hashtag
  or one name in common never makes a repeat of a short post on its own.

The share (0 to 1) is what a warning found by words shows beside the cosine.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from service.history.fusion import rrf
from service.history.match_modes import Match
from service.history.retrieval import Retriever
from service.history.view import HistoryView
from service.storage import keywords

#: Distinct terms a draft and an earlier post must share to be a repeat by words.
MIN_SHARED = 3
#: Posts of a window, best BM25 first, whose share is worked out.
DEPTH = 100


def words_above(
    retrieval: Retriever, view: HistoryView, text: str, rows: np.ndarray, share: float
) -> list[tuple[int, float]]:
    """(History row, words share) of every post among History ``rows`` whose
    words the draft ``text`` repeats by the rule above, highest share first."""
    terms = set(keywords.words(text))
    if len(rows) == 0 or len(terms) < MIN_SHARED:
        return []
    h = view.history
    row_of = {int(pk): int(r) for pk, r in zip(h.pk[rows], rows, strict=True)}
    found = retrieval.by_words(text, min(DEPTH, len(rows)), allowed_pks=h.pk[rows])
    with retrieval.store.engine.connect() as conn:
        stored = keywords.stored_words(conn, [pk for pk, _ in found])
    close = [(pk, s) for pk, s in found if len(terms & set(stored.get(pk, ()))) >= MIN_SHARED]
    selfs = retrieval.self_scores(np.asarray([pk for pk, _ in close], dtype=np.int64))
    out = [(row_of[pk], s / selfs[pk]) for pk, s in close if selfs.get(pk, 0.0) > 0]
    out = [(r, min(1.0, x)) for r, x in out if x >= share]
    return sorted(out, key=lambda rx: (-rx[1], rx[0]))


def combined(
    match: Match, by_meaning: Sequence[tuple[int, float]], by_words: Sequence[tuple[int, float]]
) -> list[int]:
    """The History rows warned about under ``match``, best first: ``both``
    warns about a post either rule finds, ordered by reciprocal rank fusion
    of the two lists (``service.history.fusion``)."""
    if match is Match.MEANING:
        return [r for r, _ in by_meaning]
    if match is Match.WORDS:
        return [r for r, _ in by_words]
    return [r for r, _ in rrf([[r for r, _ in by_meaning], [r for r, _ in by_words]])]
