"""The approximate (HNSW) index of models.index and the workspace around it.

The reference throughout is scikit-learn's exact brute-force cosine search,
``NearestNeighbors(metric="cosine", algorithm="brute")``, an implementation
independent of FAISS.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from sklearn.neighbors import NearestNeighbors

from models.index import VectorIndex
from service.health import health as health_of
from service.workspace import Workspace


def sklearn_topk(base: np.ndarray, ids: np.ndarray, queries: np.ndarray, k: int):
    """Reference: scikit-learn's exact brute-force cosine neighbours (similarities, ids)."""
    k = min(k, len(base))
    nn = NearestNeighbors(n_neighbors=k, metric="cosine", algorithm="brute").fit(base)
    dist, pos = nn.kneighbors(queries)
    return 1.0 - dist, ids[pos]


def recall(
    got_ids: np.ndarray, got_sims: np.ndarray, ref_ids: np.ndarray, ref_sims: np.ndarray, tol: float = 1e-5
) -> float:
    """Share of the reference top-k found; a returned id whose similarity
    reaches the reference k-th (an exact tie: the demo repeats a few texts)
    counts as found. Found ids must be real neighbours: their similarity
    agrees with the reference's similarity of that rank or better."""
    k = ref_ids.shape[1]
    hits = 0
    for g, gs, r, rs in zip(got_ids[:, :k], got_sims[:, :k], ref_ids, ref_sims, strict=True):
        found = set(g[g >= 0].tolist())
        hits += len(found & set(r.tolist()))
        hits += sum(
            1 for i, s in zip(g, gs, strict=True) if i >= 0 and i not in set(r.tolist()) and s >= rs[-1] - tol
        )
    return hits / ref_ids.size


def perturb(rng: np.random.Generator, vecs: np.ndarray, n: int, scale: float) -> np.ndarray:
    v = vecs[rng.integers(0, len(vecs), n)] + rng.normal(0, scale, (n, vecs.shape[1]))
    return (v / np.linalg.norm(v, axis=1, keepdims=True)).astype(np.float32)


@pytest.fixture(scope="module")
def demo_vectors(demo_workspace: Workspace) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Store ids, stored vectors and accounts of the demo posts."""
    df = demo_workspace.store.posts_frame()
    vecs = demo_workspace.store.vectors(df["vector_key"].tolist())
    return df["pk"].to_numpy(np.int64), vecs, df["account"].to_numpy()


def test_hnsw_recall_on_demo_vectors(demo_vectors) -> None:
    ids, vecs, _ = demo_vectors
    index = VectorIndex(approximate_above=1).fit(ids, vecs)
    assert index.approximate
    rng = np.random.default_rng(5)
    queries = perturb(rng, vecs, 300, 0.02)  # drafts near past posts
    sims, got = index.search(queries, 10)
    ref_sims, ref_ids = sklearn_topk(vecs, ids, queries, 10)
    assert recall(got, sims, ref_ids, ref_sims) >= 0.98
    # The index measured its own recall at build and kept it at the target.
    assert index.config()["recall_at_10"] >= 0.98


def test_hnsw_recall_on_a_perturbed_100k_set(demo_vectors) -> None:
    _, vecs, _ = demo_vectors
    rng = np.random.default_rng(6)
    # 100,000 vectors around the demo's: each demo post about 33 times, moved a little.
    base = perturb(rng, vecs, 100_000, 0.02)
    ids = rng.choice(10**9, size=len(base), replace=False).astype(np.int64)
    index = VectorIndex(approximate_above=50_000).fit(ids, base)
    assert index.approximate and index.config()["recall_at_10"] >= 0.98
    queries = perturb(rng, vecs, 200, 0.03)
    sims, got = index.search(queries, 10)
    ref_sims, ref_ids = sklearn_topk(base, ids, queries, 10)
    assert recall(got, sims, ref_ids, ref_sims) >= 0.98


@pytest.mark.parametrize("exact_subset_max", [0, 20_000])  # the graph walk, the exact gather
def test_filtered_hnsw_search_equals_exact_filtered_search(demo_vectors, exact_subset_max) -> None:
    ids, vecs, accounts = demo_vectors
    index = VectorIndex(approximate_above=1, exact_subset_max=exact_subset_max).fit(ids, vecs)
    rng = np.random.default_rng(8)
    queries = perturb(rng, vecs, 100, 0.02)
    for mask in (accounts == "loomhaven", rng.random(len(ids)) < 0.5):
        sims, got = index.search(queries, 10, allowed_ids=ids[mask])
        assert np.isin(got[got >= 0], ids[mask]).all()
        ref_sims, ref_ids = sklearn_topk(vecs[mask], ids[mask], queries, 10)
        # The best match is the exact one (or an exact tie of it) for every query...
        np.testing.assert_allclose(sims[:, 0], ref_sims[:, 0], atol=1e-5)
        # ...and the top ten are the exact top ten.
        assert recall(got, sims, ref_ids, ref_sims) >= 0.98


def test_hnsw_upsert_remove_and_reload(demo_vectors, tmp_path: Path) -> None:
    ids, vecs, _ = demo_vectors
    index = VectorIndex(approximate_above=1).fit(ids, vecs, fingerprint="a")
    rng = np.random.default_rng(9)
    gone = ids[:100]
    assert index.remove(gone, fingerprint="b") == 100
    moved = ids[100:150]
    new_vecs = perturb(rng, vecs, 50, 0.5)
    index.upsert(moved, new_vecs, fingerprint="c")
    assert index.ntotal == len(ids) - 100 and index.tombstones == 150
    index.save(tmp_path)
    loaded = VectorIndex.load(tmp_path)
    assert loaded.fingerprint_ == "c" and loaded.ntotal == len(ids) - 100
    truth_ids = np.concatenate([moved, ids[150:]])
    truth = np.vstack([new_vecs, vecs[150:]])
    for idx in (index, loaded):
        # A removed post's own vector never finds it again.
        sims, got = idx.search(vecs[:100], 10)
        assert not np.isin(got, gone).any()
        q = np.vstack([vecs[:100], new_vecs])
        sims, got = idx.search(q, 10)
        ref_sims, ref_ids = sklearn_topk(truth, truth_ids, q, 10)
        assert recall(got, sims, ref_ids, ref_sims) >= 0.98


def test_forget_removes_posts_from_the_approximate_index(demo_copy: Workspace, demo_vectors) -> None:
    ids, vecs, accounts = demo_vectors
    demo_copy.settings.index_approximate_above = 1
    index = demo_copy.reindex()
    assert index.approximate
    state = demo_copy.search_state()
    assert state is not None and state["approximate"] and state["recall_at_10"] >= 0.98
    assert health_of(demo_copy).model_dump()["search"] == state  # what GET /v1/health reports
    victim = 42
    demo_copy.forget(
        account=str(accounts[victim]), post_id=str(demo_copy.store.posts_frame().iloc[victim]["post_id"])
    )
    n = demo_copy.forget(account="loomhaven_lab")
    assert n > 0
    gone = set(ids[accounts == "loomhaven_lab"].tolist()) | {int(ids[victim])}
    q = np.vstack([vecs[victim : victim + 1], vecs[accounts == "loomhaven_lab"][:200]])
    hits = demo_copy.retrieval.nearest(q, 20)
    assert all(p not in gone for h in hits for p, _ in h)
    # Also from the index saved to disk, as a restarted service would load it.
    loaded = VectorIndex.load(demo_copy.settings.index_dir)
    _, got = loaded.search(q, 20)
    assert not np.isin(got, list(gone)).any()
    assert loaded.ntotal == len(ids) - len(gone)
    assert demo_copy.index_state() == {"state": "ready", "count": len(ids) - len(gone)}
