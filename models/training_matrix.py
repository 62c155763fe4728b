"""Leak-free feature rows of every post of a history at once, in array
operations: each post's neighbours among the posts eligible at its time (exact
blocked products, or HNSW graphs grown in time order past a size), then the
statistics of ``models.features`` for all rows together.

The rules are ``models.features``' (``assemble`` for one row); this module only
computes them for many rows without a Python loop per row.
"""

from __future__ import annotations

from dataclasses import dataclass

import faiss
import numpy as np

from models.features import (
    DAY,
    FEATURE_NAMES,
    NEIGHBOUR_STATS,
    FeatureParams,
    History,
)


def training_matrix(
    history: History,
    *,
    local_hours: np.ndarray,
    weekdays: np.ndarray,
    forms: np.ndarray,
    params: FeatureParams,
    block: int = 256,
    rows: np.ndarray | None = None,
    neighbours: Neighbours | None = None,
    approximate_above: int | None = None,
) -> np.ndarray:
    """Feature rows for the posts ``rows`` of ``history`` (default: every
    post), leak-free (see module doc).

    Array operations throughout: the neighbours of every row come from
    ``neighbours`` (default: ``exact_neighbours``, blocked exact products with
    a vectorised top-k), then the statistics are computed for all rows at
    once, group by group of rows with the same number of neighbours.
    Neighbours are always looked for in the whole history, whichever rows
    are asked for. From ``approximate_above`` posts on (None: never), they
    come from ``approximate_neighbours`` instead: HNSW graphs grown in time
    order, since exact products grow with the square of the history.
    """
    n = len(history)
    rows = np.arange(n) if rows is None else np.asarray(rows, dtype=np.int64)
    if neighbours is None and approximate_above is not None and n >= approximate_above:
        neighbours = approximate_neighbours(history, rows=rows, params=params)
    elif neighbours is None:
        neighbours = exact_neighbours(history, rows=rows, params=params, block=block)
    X = np.empty((len(rows), len(FEATURE_NAMES)), dtype=np.float64)
    t = history.time[rows]
    ns = len(NEIGHBOUR_STATS)
    X[:, :ns] = _stats_of(history, neighbours.team, neighbours.team_sims, t, params)
    X[:, ns : 2 * ns] = _stats_of(history, neighbours.own, neighbours.own_sims, t, params)
    X[:, 2 * ns : 2 * ns + 2] = _baselines(history, rows, params)
    angle = 2 * np.pi * (np.asarray(local_hours, dtype=np.float64)[rows] / 24.0)
    X[:, 2 * ns + 2] = np.sin(angle)
    X[:, 2 * ns + 3] = np.cos(angle)
    X[:, 2 * ns + 4] = np.asarray(weekdays, dtype=np.float64)[rows]
    X[:, 2 * ns + 5 :] = np.asarray(forms, dtype=np.float64).reshape(n, -1)[rows]
    return X


@dataclass(slots=True)
class Neighbours:
    """Neighbours of many posts as (rows, k) arrays of History rows (-1 pads
    a short list) and their similarities, best first, across the team and
    within each post's own account."""

    team: np.ndarray
    team_sims: np.ndarray
    own: np.ndarray
    own_sims: np.ndarray


def exact_neighbours(
    history: History, *, rows: np.ndarray, params: FeatureParams, block: int = 256
) -> Neighbours:
    """Leak-free top-k neighbours of ``rows`` by exact inner products, block
    by block; each block only looks at the posts that came before its last
    post. Order: similarity descending, then earlier row first."""
    k = params.k
    team = np.full((len(rows), k), -1, dtype=np.int64)
    own = np.full((len(rows), k), -1, dtype=np.int64)
    team_s = np.full((len(rows), k), -np.inf, dtype=np.float32)
    own_s = np.full((len(rows), k), -np.inf, dtype=np.float32)
    settled = ~np.isnan(history.log_target)
    unsettled = np.flatnonzero(~settled)
    limit = np.searchsorted(history.time, history.time - params.maturity_s, side="right")
    by_account = {int(a): np.flatnonzero(history.account == a) for a in np.unique(history.account)}
    order = np.argsort(rows, kind="stable")  # blocks of consecutive rows share a horizon
    for b0 in range(0, len(rows), block):
        at = order[b0 : b0 + block]
        r = rows[at]
        horizon = int(np.searchsorted(history.time, history.time[r.max()], side="right"))
        # A run of rows is sliced, not gathered: BLAS may round a copied
        # operand differently, and the products must equal the reference's.
        run = r[-1] - r[0] + 1 == len(r) and bool(np.all(np.diff(r) == 1))
        Q = history.vectors[r[0] : r[-1] + 1] if run else history.vectors[r]
        S = Q @ history.vectors[:horizon].T
        # Eligible: published and settled by the row's time less maturity, with
        # a metric. Eligibility is a prefix of the columns per row, so only the
        # few columns between the block's shortest and longest prefix need a
        # per-row mask.
        lim = limit[r]
        lo = int(lim.min())
        if lo < horizon:
            tail = np.arange(lo, horizon)
            S[:, lo:] = np.where(tail[None, :] < lim[:, None], S[:, lo:], -np.inf)
        S[:, unsettled[unsettled < horizon]] = -np.inf
        team[at], team_s[at] = _top_rows(S, k)
        for a in np.unique(history.account[r]):
            mine = np.flatnonzero(history.account[r] == a)
            cols = by_account[int(a)]
            cols = cols[: int(np.searchsorted(cols, horizon))]
            i, s_ = _top_rows(S[np.ix_(mine, cols)], k)
            own[at[mine]] = np.where(i >= 0, cols[np.maximum(i, 0)], -1)
            own_s[at[mine]] = s_
    return Neighbours(team, team_s, own, own_s)


def approximate_neighbours(
    history: History,
    *,
    rows: np.ndarray,
    params: FeatureParams,
    exact_below: int = 20_000,
    chunk: int = 256,
    overfetch: int = 4,
    hnsw_m: int = 32,
    ef_search: int = 128,
) -> Neighbours:
    """Leak-free neighbours of ``rows`` from HNSW graphs grown in time order
    (one over the team, one per large account), for histories too large for
    exact products.

    The graphs hold only settled posts, added oldest first; before a chunk
    of rows is answered they are grown up to the chunk's last eligible post,
    so the time filter only has to drop the few posts between a row's own
    limit and the chunk's. Rows with few eligible posts, small accounts and
    rows the over-fetch left short are answered exactly.
    """
    k = params.k
    rows = np.sort(np.asarray(rows, dtype=np.int64))
    out = Neighbours(
        np.full((len(rows), k), -1, dtype=np.int64),
        np.full((len(rows), k), -np.inf, dtype=np.float32),
        np.full((len(rows), k), -1, dtype=np.int64),
        np.full((len(rows), k), -np.inf, dtype=np.float32),
    )
    settled = np.flatnonzero(~np.isnan(history.log_target))
    limit = np.searchsorted(history.time, history.time - params.maturity_s, side="right")
    seen = np.searchsorted(settled, limit[rows])  # settled posts each row may see
    early = seen < exact_below
    if early.any():  # few eligible posts: exact products are cheap
        ex = exact_neighbours(history, rows=rows[early], params=params)
        for name in ("team", "team_sims", "own", "own_sims"):
            getattr(out, name)[early] = getattr(ex, name)
    late = np.flatnonzero(~early)
    if not len(late):
        return out
    graphs: dict[int | None, _Growing] = {None: _Growing(history, settled, hnsw_m)}
    for a in np.unique(history.account[rows[late]]):
        mine = settled[history.account[settled] == a]
        graphs[int(a)] = _Growing(history, mine, hnsw_m)
    for c0 in range(0, len(late), chunk):
        at = late[c0 : c0 + chunk]
        r = rows[at]
        q = history.vectors[r]
        for key, graph in graphs.items():
            pick = np.arange(len(r)) if key is None else np.flatnonzero(history.account[r] == key)
            if not len(pick):
                continue
            n_ok = np.searchsorted(graph.rows, limit[r[pick]])  # the graph's eligible prefix
            idx, sims = graph.top(
                q[pick], n_ok, k, exact_below=exact_below, overfetch=overfetch, ef=ef_search
            )
            if key is None:
                out.team[at[pick]], out.team_sims[at[pick]] = idx, sims
            else:
                out.own[at[pick]], out.own_sims[at[pick]] = idx, sims
    return out


class _Growing:
    """An HNSW graph over some History rows (settled, in time order), grown
    on demand up to a prefix of them."""

    def __init__(self, history: History, rows: np.ndarray, m: int) -> None:
        self.history, self.rows = history, rows
        self.graph = faiss.IndexHNSWFlat(history.vectors.shape[1], m, faiss.METRIC_INNER_PRODUCT)
        self.graph.hnsw.efConstruction = 40
        self.added = 0

    def top(
        self, q: np.ndarray, n_ok: np.ndarray, k: int, *, exact_below: int, overfetch: int, ef: int
    ) -> tuple[np.ndarray, np.ndarray]:
        """Top-``k`` History rows among the first ``n_ok[i]`` of this graph's
        rows for each query ``q[i]``; best first, earlier row first on ties."""
        idx = np.full((len(q), k), -1, dtype=np.int64)
        sims = np.full((len(q), k), -np.inf, dtype=np.float32)
        top = int(n_ok.max())
        vecs = self.history.vectors
        if top < exact_below:  # a small graph (a small account): exact
            S = q @ vecs[self.rows[:top]].T
            S[np.arange(top)[None, :] >= n_ok[:, None]] = -np.inf
            i, s_ = _top_rows(S, k)
            return np.where(i >= 0, self.rows[np.maximum(i, 0)], -1), s_
        if top > self.added:
            self.graph.add(np.ascontiguousarray(vecs[self.rows[self.added : top]]))
            self.added = top
        K = min(overfetch * k, self.added)
        params = faiss.SearchParametersHNSW()
        params.efSearch = max(ef, K)
        D, P = self.graph.search(np.ascontiguousarray(q, dtype=np.float32), K, params=params)
        ok = (P >= 0) & (P < n_ok[:, None])
        D = np.where(ok, D, -np.inf).astype(np.float32)
        P = np.where(ok, P, np.iinfo(np.int64).max)
        o = np.lexsort((P, -D), axis=-1)[:, :k]
        D, P = np.take_along_axis(D, o, axis=1), np.take_along_axis(P, o, axis=1)
        fine = np.isfinite(D)
        found = np.where(fine, self.rows[np.minimum(P, len(self.rows) - 1)], -1)
        idx[:, : found.shape[1]], sims[:, : found.shape[1]] = found, D
        # Rows the over-fetch left short: exact over their eligible prefix.
        for row in np.flatnonzero(fine.sum(axis=1) < np.minimum(k, n_ok)):
            s_ = vecs[self.rows[: n_ok[row]]] @ q[row]
            j, v = _top_rows(s_[None, :], k)
            idx[row] = np.where(j[0] >= 0, self.rows[np.maximum(j[0], 0)], -1)
            sims[row] = v[0]
        return idx, sims


def _top_rows(M: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    """Per row of ``M`` (-inf marks the ineligible), the top-``k`` columns by
    value, then lower column first: the top ``k`` by value, ties to the lower column.

    A wide matrix is not partitioned whole: a lower bound of each row's k-th
    value is the k-th value of a sample of its columns, and only the columns
    reaching that bound (a few hundred) are sorted."""
    b, m = M.shape
    sample = max(8 * k, 512)
    if m <= 4 * sample:
        return _top_rows_partition(M, k)
    step = m // sample
    S = M[:, ::step]
    bound = -np.partition(-S, k - 1, axis=1)[:, k - 1]  # k-th largest of the sample
    idx = np.full((b, k), -1, dtype=np.int64)
    sims = np.full((b, k), -np.inf, dtype=np.float32)
    few = ~np.isfinite(bound)  # under k eligible in the sample: do these rows whole
    if few.any():
        idx[few], sims[few] = _top_rows_partition(M[few], k)
    ok = np.flatnonzero(~few)
    if len(ok):
        sub = M[ok] if few.any() else M
        ri, ci = np.nonzero(sub >= bound[ok][:, None])
        vals = sub[ri, ci]
        o = np.lexsort((ci, -vals, ri))
        ri, ci, vals = ri[o], ci[o], vals[o]
        start = np.searchsorted(ri, np.arange(len(ok)))
        rank = np.arange(len(ri)) - start[ri]
        keep = rank < k
        idx[ok[ri[keep]], rank[keep]] = ci[keep]
        sims[ok[ri[keep]], rank[keep]] = vals[keep]
    return idx, sims


def _top_rows_partition(M: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    """``_top_rows`` by partitioning every row whole (narrow matrices)."""
    b, m = M.shape
    idx = np.full((b, k), -1, dtype=np.int64)
    sims = np.full((b, k), -np.inf, dtype=np.float32)
    if m == 0:
        return idx, sims
    kk = min(k, m)
    part = np.argpartition(-M, kk - 1, axis=1)[:, :kk] if kk < m else np.tile(np.arange(m), (b, 1))
    ps = np.take_along_axis(M, part, axis=1)
    o = np.lexsort((part, -ps), axis=-1)
    part, ps = np.take_along_axis(part, o, axis=1), np.take_along_axis(ps, o, axis=1)
    # A tie at the k-th value may leave out a lower column of the same value:
    # those (rare) rows are redone one by one.
    if kk < m:
        kth = ps[:, -1]
        tied = np.isfinite(kth) & ((M == kth[:, None]).sum(axis=1) > (ps == kth[:, None]).sum(axis=1))
        for i in np.flatnonzero(tied):
            cand = np.flatnonzero(np.isfinite(M[i]))
            best = cand[np.lexsort((cand, -M[i, cand]))[:kk]]
            part[i], ps[i] = best, M[i, best]
    valid = np.isfinite(ps)
    idx[:, :kk] = np.where(valid, part, -1)
    sims[:, :kk] = ps
    return idx, sims


def _stats_of(
    history: History, idx: np.ndarray, sims: np.ndarray, t: np.ndarray, params: FeatureParams
) -> np.ndarray:
    """``neighbour_stats`` for many rows at once (rows grouped by how many
    neighbours they have, so each group is a plain matrix)."""
    out = np.full((len(idx), len(NEIGHBOUR_STATS)), np.nan, dtype=np.float64)
    counts = (idx >= 0).sum(axis=1)
    for c in np.unique(counts):
        if c == 0:
            continue
        g = np.flatnonzero(counts == c)
        Nb, S = idx[g, :c], sims[g, :c]
        L = history.log_target[Nb]
        W = np.clip(S, 0.0, None)
        wsum = W.sum(axis=1)
        pos = wsum > 0
        W64 = np.empty(W.shape, dtype=np.float64)
        W64[pos] = W[pos] / wsum[pos][:, None]
        W64[~pos] = 1.0 / c
        # Batched matmul of 1 x c by c x 1 calls the same dot product as
        # np.dot row by row, so the sums round exactly as in neighbour_stats.
        wmean = (W64[:, None, :] @ L[:, :, None])[:, 0, 0]
        out[g, 0] = wmean
        out[g, 1] = np.median(L, axis=1)
        dev = np.ascontiguousarray((L - wmean[:, None]) ** 2)
        out[g, 2] = np.sqrt((W64[:, None, :] @ dev[:, :, None])[:, 0, 0])
        out[g, 3] = L.max(axis=1)
        out[g, 4] = S[:, 0]
        out[g, 5] = (S >= params.similar_threshold).sum(axis=1)
        out[g, 6] = (t[g] - history.time[Nb[:, 0]]) / DAY
    return out


def account_baselines(history: History, params: FeatureParams) -> np.ndarray:
    """The ``baseline`` feature of every post of ``history``."""
    return _baselines(history, np.arange(len(history)), params)[:, 0]


def _baselines(history: History, rows: np.ndarray, params: FeatureParams) -> np.ndarray:
    """``baseline`` for many rows: the median of each account's last N posts
    settled by the row's time, from one sorted list per account."""
    out = np.empty((len(rows), 2), dtype=np.float64)
    out[:, 0], out[:, 1] = np.nan, 0.0
    settled = ~np.isnan(history.log_target)
    for a in np.unique(history.account[rows]):
        mine = np.flatnonzero(history.account[rows] == a)
        own = np.flatnonzero((history.account == a) & settled)
        times, logs = history.time[own], history.log_target[own]
        # How many of the account's settled posts each row may see.
        seen = np.searchsorted(times, history.time[rows[mine]] - params.maturity_s, side="right")
        med = np.full(len(own) + 1, np.nan)
        nb = params.baseline_n
        for c in range(1, min(nb, len(own) + 1)):
            med[c] = np.median(logs[:c])
        if len(own) >= nb:
            med[nb:] = np.median(np.lib.stride_tricks.sliding_window_view(logs, nb), axis=1)
        out[mine, 0] = med[seen]
        out[mine, 1] = np.minimum(seen, nb)
    return out
