"""The training matrix in array operations (models.features.training_matrix)
against the row-by-row loop it replaced, and the approximate neighbours used
past a size threshold against exact ones.

References: the row-by-row rules written out below (``training_matrix_loop``,
rows built one at a time with ``assemble`` over a plain top-k), and scikit-learn's
exact ``NearestNeighbors(metric="cosine",
algorithm="brute")`` for the neighbours themselves.
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.neighbors import NearestNeighbors

from models import features as F
from models import training_matrix as TM
from service.history.view import build_view, feature_params


def _top(sims: np.ndarray, valid: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    cand = np.flatnonzero(valid)
    if len(cand) == 0:
        return cand, np.zeros(0, dtype=np.float32)
    s = sims[cand]
    if len(cand) > k:
        # Ties at the k-th similarity (posts with the same text have the same
        # vector) go to the earlier posts, so the choice is deterministic.
        kth = s[np.argpartition(-s, k - 1)[k - 1]]
        above = np.flatnonzero(s > kth)
        tied = np.flatnonzero(s == kth)[: k - len(above)]
        keep = np.concatenate([above, tied])
        cand, s = cand[keep], s[keep]
    # Stable order: similarity descending, then earlier index first.
    order = np.lexsort((cand, -s))
    return cand[order], s[order]


def training_matrix_loop(
    history: F.History,
    *,
    local_hours: np.ndarray,
    weekdays: np.ndarray,
    forms: np.ndarray,
    params: F.FeatureParams,
    block: int = 256,
) -> np.ndarray:
    """The row-by-row statement of the rules ``F.training_matrix`` computes with
    array operations: each post's neighbours among the posts eligible at its time."""
    n = len(history)
    X = np.empty((n, len(F.FEATURE_NAMES)), dtype=np.float64)
    for start in range(0, n, block):
        stop = min(n, start + block)
        horizon = int(np.searchsorted(history.time, history.time[stop - 1], side="right"))
        S = history.vectors[start:stop] @ history.vectors[:horizon].T
        for r, i in enumerate(range(start, stop)):
            t = history.time[i]
            ok = F.eligible(history, t, params)[:horizon]
            team, team_s = _top(S[r], ok, params.k)
            own, own_s = _top(S[r], ok & (history.account[:horizon] == history.account[i]), params.k)
            X[i], _ = F.assemble(
                history,
                F.Neighbourhood(team, team_s, own, own_s),
                t=t,
                account=int(history.account[i]),
                local_hour=float(local_hours[i]),
                weekday=int(weekdays[i]),
                form=forms[i],
                params=params,
            )
    return X


@pytest.fixture(scope="module")
def view(demo_workspace):
    return build_view(demo_workspace.store, "impressions", with_vectors=True)


@pytest.fixture(scope="module")
def params(demo_workspace):
    return feature_params(demo_workspace.settings)


def _kw(v, params):
    return {"local_hours": v.local_hours, "weekdays": v.weekdays, "forms": v.forms, "params": params}


def test_array_matrix_equals_the_loop_on_the_demo(view, params) -> None:
    # 3,000 posts over three accounts, a few texts posted twice (exact ties).
    X = TM.training_matrix(view.history, **_kw(view, params))
    ref = training_matrix_loop(view.history, **_kw(view, params))
    assert np.array_equal(X, ref, equal_nan=True)  # bit for bit
    assert np.isfinite(X[:, 0]).sum() > 2500  # and not vacuous: most rows have neighbours


def test_array_matrix_equals_the_loop_with_ties_and_missing_metrics(view, params) -> None:
    """A synthetic history of 4,000 posts: repeated vectors (ties at the k-th
    neighbour), posts without the metric, and a small fourth account."""
    rng = np.random.default_rng(12)
    h = view.history
    n = 4000
    pick = rng.integers(0, len(h), n)
    pick[::7] = pick[0]  # one text many times over: exact ties
    logs = h.log_target[pick].copy()
    logs[rng.random(n) < 0.1] = np.nan
    account = h.account[pick].copy()
    account[rng.random(n) < 0.02] = 7
    time = np.sort(rng.uniform(h.time.min(), h.time.max(), n))
    hist = F.History(
        pk=np.arange(n),
        time=time,
        account=account,
        log_target=logs,
        vectors=np.ascontiguousarray(h.vectors[pick]),
    )
    kw = {
        "local_hours": view.local_hours[pick],
        "weekdays": view.weekdays[pick],
        "forms": view.forms[pick],
        "params": params,
    }
    assert np.array_equal(TM.training_matrix(hist, **kw), training_matrix_loop(hist, **kw), equal_nan=True)


def test_rows_subset_keeps_neighbours_from_the_whole_history(view, params) -> None:
    h = view.history
    full = TM.training_matrix(h, **_kw(view, params))
    # The cap: the most recent posts only. Starting on a block boundary, the
    # blocks and so the products are the same as the full run's (BLAS may round
    # a product differently in another block shape, which can flip exact ties).
    rows = np.arange((len(h) - 700) // 256 * 256, len(h))
    part = TM.training_matrix(h, rows=rows, **_kw(view, params))
    assert np.array_equal(part, full[rows], equal_nan=True)


def test_exact_neighbours_are_sklearns(view, params) -> None:
    h = view.history
    rows = np.arange(len(h) - 300, len(h))
    nb = TM.exact_neighbours(h, rows=rows, params=params)
    for j, i in enumerate(rows[::10]):
        ok = np.flatnonzero(F.eligible(h, h.time[i], params))
        # Reference: scikit-learn's exact brute-force cosine search over the eligible posts.
        nn = NearestNeighbors(n_neighbors=params.k, metric="cosine", algorithm="brute")
        dist, _pos = nn.fit(h.vectors[ok]).kneighbors(h.vectors[i : i + 1])
        np.testing.assert_allclose(nb.team_sims[j * 10], 1.0 - dist[0], atol=1e-5)


def test_approximate_neighbours_match_exact_ones(view, params) -> None:
    h = view.history
    rows = np.arange(len(h))
    exact = TM.exact_neighbours(h, rows=rows, params=params)
    # exact_below=300: nearly every row goes through the time-ordered graphs.
    approx = TM.approximate_neighbours(h, rows=rows, params=params, exact_below=300)
    for a, e in ((approx.team, exact.team), (approx.own, exact.own)):
        found = [
            len(set(x[x >= 0]) & set(y[y >= 0])) / max(1, int((y >= 0).sum()))
            for x, y in zip(a, e, strict=True)
        ]
        assert np.mean(found) >= 0.97
        # Leak-free as well: every neighbour was settled before its row's post.
        r, c = np.nonzero(a >= 0)
        assert (h.time[a[r, c]] <= h.time[rows[r]] - params.maturity_s).all()
        assert not np.isnan(h.log_target[a[r, c]]).any()
