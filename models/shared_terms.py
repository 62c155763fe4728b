"""Posts sharing a post's key terms (its hashtags, or its rarest words): how
many earlier *settled* posts share at least one of them, and the median of
their log metric (NaN when none).

Leak-free by the rule every feature follows (``models.features.eligible``):
for a post at time ``t`` only posts settled by then count (posted at or
before ``t - maturity``, with a metric), so a later post's metric never
reaches an earlier row. The terms themselves come from the caller (the
keyword index's tokens, ``service.storage.keywords``): this module sees only
sets of strings.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Sequence

import numpy as np

from models import features as F

#: The columns, after ``models.features.FEATURE_NAMES`` and the stacked extras.
NAMES: tuple[str, ...] = ("shared_terms_n", "shared_terms_median")
#: Rarest words kept as a post's key terms when it has no hashtag.
RARE_TERMS = 3


def document_frequency(tokens: Sequence[Sequence[str]]) -> Counter[str]:
    """In how many of these texts each term occurs (words, never metrics)."""
    return Counter(t for toks in tokens for t in set(toks))


def key_terms(
    tokens: Sequence[Sequence[str]], *, hashtags_only: bool, df: Counter[str] | None = None
) -> list[frozenset[str]]:
    """Each post's key terms: its hashtags, or (``hashtags_only`` False) its
    ``RARE_TERMS`` rarest words among those found in two posts or more, by
    ``df`` (``document_frequency`` of these texts when not given)."""
    if not hashtags_only and df is None:
        df = document_frequency(tokens)
    return [keys_of(toks, None if hashtags_only else df, extra=0) for toks in tokens]


def keys_of(tokens: Sequence[str], df: Counter[str] | None, *, extra: int = 1) -> frozenset[str]:
    """One text's key terms: its hashtags (``df`` None), or its rarest words
    by ``df``; ``extra`` counts the text itself when ``df`` leaves it out
    (a draft: 1), so "found in two posts" means it and one other."""
    if df is None:
        return frozenset(t for t in tokens if t.startswith("#"))
    shared = sorted((df[t] + extra, t) for t in set(tokens) if df[t] + extra >= 2)
    return frozenset(t for _, t in shared[:RARE_TERMS])


class TermIndex:
    """The history's rows by key term, each list in time order."""

    def __init__(self, history: F.History, keys: Sequence[frozenset[str]]) -> None:
        order = np.argsort(history.time, kind="stable")
        lists: dict[str, list[int]] = {}
        for r in order:
            for t in keys[r]:
                lists.setdefault(t, []).append(int(r))
        self.history = history
        self.rows = {t: np.asarray(v, dtype=np.int64) for t, v in lists.items()}

    def stats(self, terms: frozenset[str], t: float, params: F.FeatureParams) -> tuple[float, float]:
        """(count, median log metric) of posts settled by ``t`` sharing a term."""
        h = self.history
        found: list[np.ndarray] = []
        for term in terms:
            rows = self.rows.get(term)
            if rows is None:
                continue
            end = int(np.searchsorted(h.time[rows], t - params.maturity_s, side="right"))
            found.append(rows[:end])
        if not found:
            return 0.0, float("nan")
        rows = np.unique(np.concatenate(found))
        logs = h.log_target[rows]
        logs = logs[~np.isnan(logs)]
        return float(len(logs)), (float(np.median(logs)) if len(logs) else float("nan"))

    def columns(
        self, keys: Sequence[frozenset[str]], params: F.FeatureParams, rows: np.ndarray
    ) -> np.ndarray:
        """The two columns for History ``rows``, each at its own posting time."""
        h = self.history
        return np.array(
            [self.stats(keys[r], float(h.time[r]), params) for r in rows], dtype=np.float64
        ).reshape(len(rows), 2)
