"""Retrieval: the one place that answers "the nearest earlier posts of this
vector, under these filters" (account, time range, settled by a time).

A thin layer over ``models.index.VectorIndex.search`` (drafts, near-repeats,
precedents) and ``models.features`` (training rows and the leak-free
eligibility rule), so the index and the feature internals can change under it.
Training rows and drafts take their neighbours by the same rule: posts
published and settled (``features.eligible``) before the post's time, the
``k`` most similar across the team and within the account.
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from datetime import datetime

import numpy as np

from models import features as F
from models import training_matrix as TM
from models.index import VectorIndex
from service.history.view import HistoryView
from service.storage import keywords
from service.storage.store import Store

#: Nearest posts fetched per draft in one unfiltered pass before filtering.
WIDE = 200
#: Posts the index holds beyond a view (reference accounts' posts) are
#: skipped by fetching that many more; past this many, the search is limited
#: to the view's posts instead.
OVERFETCH_MAX = 2000

Hits = list[tuple[int, float]]  # (store row id, similarity), best first
Found = tuple[np.ndarray, np.ndarray]  # (History rows, similarities), best first
WideCache = dict[bytes, Found]  # one unfiltered search per distinct vector


class Retriever:
    """Nearest posts of a vector under filters, over one data directory's index.

    ``index`` returns the current index (checked against the store); searches
    run under ``lock``, because the index is changed in place by imports and
    forgets, and FAISS allows no search while ids are removed or added.
    """

    def __init__(self, *, store: Store, index: Callable[[], VectorIndex], lock: threading.RLock) -> None:
        self.store = store
        self._index = index
        self._lock = lock
        #: Posts' BM25 self-scores, valid while the store's change counter stands.
        self._self_scores: tuple[int, dict[int, float]] = (-1, {})

    # Store row ids ----------------------------------------------------------

    def nearest(
        self,
        vectors: np.ndarray,
        k: int,
        *,
        account: str | None = None,
        since: datetime | None = None,
        until: datetime | None = None,
        allowed_pks: np.ndarray | None = None,
    ) -> list[Hits]:
        """(post row id, similarity) of the ``k`` nearest posts per vector,
        optionally among ``allowed_pks`` or one account's posts in a date range."""
        allowed = allowed_pks
        if account is not None or since is not None or until is not None:
            allowed = self.store.pks_where(account=account, since=since, until=until)
            if allowed_pks is not None:
                allowed = np.intersect1d(allowed, allowed_pks)
        sims, ids = self._search(vectors, k, allowed)
        return [
            [(int(i), float(s)) for i, s in zip(row_ids, row_sims, strict=True) if i >= 0]
            for row_ids, row_sims in zip(ids, sims, strict=True)
        ]

    def by_words(
        self, text: str, k: int, *, allowed_pks: np.ndarray | None = None
    ) -> list[tuple[int, float]]:
        """(post row id, BM25 score) of the ``k`` posts whose words best match
        ``text`` (``service.storage.keywords``), optionally among ``allowed_pks``."""
        with self.store.engine.connect() as conn:
            return keywords.search(
                conn, text, k, allowed_pks=None if allowed_pks is None else allowed_pks.tolist()
            )

    def self_scores(self, pks: np.ndarray) -> dict[int, float]:
        """Each post's BM25 score for its own words (``keywords.self_scores``),
        kept until the store changes (the statistics behind it move then)."""
        stamp = self.store.stamp()
        with self._lock:
            if self._self_scores[0] != stamp:
                self._self_scores = (stamp, {})
            known = self._self_scores[1]
            todo = [int(p) for p in pks if int(p) not in known]
        if todo:
            with self.store.engine.connect() as conn:
                found = keywords.self_scores(conn, todo)
            with self._lock:
                if self._self_scores[0] == stamp:
                    known.update(found)
        else:
            found = {}
        return {int(p): s for p in pks if (s := known.get(int(p), found.get(int(p)))) is not None}

    def _search(
        self, vectors: np.ndarray, k: int, allowed: np.ndarray | None
    ) -> tuple[np.ndarray, np.ndarray]:
        """(similarities, store row ids; -1 for none) from the current index."""
        with self._lock:
            return self._index().search(vectors, k, allowed_ids=allowed)

    def similarities(self, vectors: np.ndarray, pks: np.ndarray) -> np.ndarray:
        """Cosine similarity of each given post (store row id) to each vector,
        shape (len(pks), len(vectors)), from the index's own stored vectors.

        For questions that need every post's score rather than the nearest
        few (topics: each post's nearest phrase); exact also where the index
        searches approximately.
        """
        queries = np.asarray(vectors, dtype=np.float32)
        with self._lock:
            stored = self._index().vectors_of(np.asarray(pks, dtype=np.int64))
        scores: np.ndarray = stored @ queries.T  # unit vectors: the dot product is the cosine
        return scores

    # History rows -----------------------------------------------------------

    def rows(self, view: HistoryView, vec: np.ndarray, k: int, allowed: np.ndarray | None = None) -> Found:
        """The ``k`` nearest posts of the view, among History rows ``allowed``."""
        if (allowed is not None and len(allowed) == 0) or k < 1:
            return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.float32)
        pks = None if allowed is None else view.history.pk[allowed]
        q = np.asarray(vec, dtype=np.float32).reshape(1, -1)
        with self._lock:
            index = self._index()
            # Posts outside the view (a peer's) must not take the places of
            # the view's own nearest posts.
            extra = 0 if pks is not None else max(0, index.ntotal - len(view.history))
            if extra > OVERFETCH_MAX:
                pks, extra = view.history.pk, 0
            sims, ids = index.search(q, k + extra, allowed_ids=pks)
        ids, sims = ids[0], sims[0]
        live = ids >= 0
        rows, held = view.rows_for(ids[live])
        return rows[:k], np.asarray(sims[live][held], dtype=np.float32)[:k]

    def wide(
        self, view: HistoryView, vec: np.ndarray, params: F.FeatureParams, cache: WideCache | None = None
    ) -> Found:
        """One wide, unfiltered search of the view (cached per vector)."""
        key = np.asarray(vec, dtype=np.float32).tobytes()
        if cache is not None and key in cache:
            return cache[key]
        found = self.rows(view, vec, min(len(view.history), max(WIDE, 10 * params.k)))
        if cache is not None:
            cache[key] = found
        return found

    def neighbourhood(
        self,
        view: HistoryView,
        vec: np.ndarray,
        *,
        t: float,
        account: int,
        params: F.FeatureParams,
        cache: WideCache | None = None,
    ) -> F.Neighbourhood:
        """A draft's neighbours at time ``t``: the ``k`` most similar posts
        settled by then across the team and within account code ``account``,
        by the rule the training rows use (``features.eligible``).

        One wide search serves both lists; a filtered search is only needed
        when the eligible posts are too rare among the nearest to fill a list.
        """
        h = view.history
        rows, sims = self.wide(view, vec, params, cache)
        # Eligibility of the found rows only; the eligible sets themselves are
        # binary searches (History.eligible_rows), not passes over the history.
        ok = F.eligible(h, t, params, rows)
        own_ok = ok & (h.account[rows] == account)
        team: Found = (rows[ok], sims[ok])
        own: Found = (rows[own_ok], sims[own_ok])
        if len(own[0]) < params.k:
            own_rows = h.eligible_rows(t, params, account)
            if len(own[0]) < min(params.k, len(own_rows)):
                own = self.rows(view, vec, params.k, own_rows)
        if len(team[0]) < params.k:
            team_rows = h.eligible_rows(t, params)
            if len(team[0]) < min(params.k, len(team_rows)):
                team = self.rows(view, vec, params.k, team_rows)
        return F.draft_neighbourhood(h, team, own, t=t, params=params)

    def above(
        self,
        view: HistoryView,
        vec: np.ndarray,
        rows: np.ndarray,
        threshold: float,
        nearest: Found | None = None,
    ) -> list[tuple[int, float]]:
        """(History row, similarity) of every post among History ``rows``
        (sorted, unique) at or above ``threshold``, best first.

        ``nearest`` is the vector's unfiltered nearest list when a forecast
        already searched: if it reaches below the threshold it holds every
        post above it, and no second pass over the index is needed.
        """
        if len(rows) == 0:
            return []
        if (
            nearest is not None
            and len(nearest[1])
            and (nearest[1][-1] < threshold or len(nearest[1]) >= len(view.history))
        ):
            near_rows, near_sims = nearest
            keep = np.isin(near_rows, rows, assume_unique=True) & (near_sims >= threshold)
            return [(int(r), float(x)) for r, x in zip(near_rows[keep], near_sims[keep], strict=True)]
        k = min(len(rows), 16)
        while True:  # widen the search until it passes below the threshold
            found_rows, found_sims = self.rows(view, vec, k, rows)
            if len(found_rows) < k or found_sims[-1] < threshold or k >= len(rows):
                break
            k = min(len(rows), k * 4)
        keep = found_sims >= threshold
        return [(int(r), float(s)) for r, s in zip(found_rows[keep], found_sims[keep], strict=True)]

    # Training rows ----------------------------------------------------------

    @staticmethod
    def training_matrix(
        view: HistoryView,
        params: F.FeatureParams,
        *,
        rows: np.ndarray | None = None,
        approximate_above: int | None = None,
    ) -> np.ndarray:
        """Leak-free feature rows of the view's posts (all, or ``rows``; needs its
        vectors): each post's neighbours by the same eligibility rule as a
        draft's, from an approximate index past ``approximate_above`` posts."""
        return TM.training_matrix(
            view.history,
            local_hours=view.local_hours,
            weekdays=view.weekdays,
            forms=view.forms,
            params=params,
            rows=rows,
            approximate_above=approximate_above,
        )
