"""Exact nearest-neighbour search (models.index) and the workspace around it.

The reference throughout is scikit-learn's exact brute-force cosine search,
``NearestNeighbors(metric="cosine", algorithm="brute")``.
"""

from __future__ import annotations

import csv
import json
import shutil
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.neighbors import NearestNeighbors

from models.embedding import Embedder
from models.errors import InputError, NotFittedError, NotFound, StoreError
from models.index import VectorIndex, fingerprint
from service.health import health as health_of
from service.ingest.options import ImportOptions
from service.settings import Settings
from service.workspace import Workspace

DEMO_CSV = Path(__file__).resolve().parents[2] / "demo_data" / "posts.csv"  # as in conftest

DIM = 384
TOL = 1e-5  # float32 inner products of unit vectors agree to about 1e-6


def demo_rows() -> int:
    """Data rows of the demo CSV, counted by Python's csv module (RFC 4180 records)."""
    with DEMO_CSV.open(encoding="utf-8-sig", newline="") as f:
        return sum(1 for _ in csv.reader(f)) - 1


def unit_gaussian(rng: np.random.Generator, n: int, dim: int = DIM) -> np.ndarray:
    v = rng.standard_normal((n, dim)).astype(np.float32)
    return v / np.linalg.norm(v, axis=1, keepdims=True)


def sklearn_topk(base: np.ndarray, ids: np.ndarray, queries: np.ndarray, k: int):
    """Reference: scikit-learn's exact brute-force cosine neighbours."""
    k = min(k, len(base))
    nn = NearestNeighbors(n_neighbors=k, metric="cosine", algorithm="brute").fit(base)
    dist, pos = nn.kneighbors(queries)
    return 1.0 - dist, ids[pos]


def assert_same_topk(
    got_sims: np.ndarray,
    got_ids: np.ndarray,
    ref_sims: np.ndarray,
    ref_ids: np.ndarray,
    sim_of: dict[int, np.ndarray] | None = None,
) -> int:
    """Same top-k sets per query, ties aside: an id may differ only where its
    similarity is within TOL of the k-th (a near-tie at the boundary).
    Returns how many queries matched exactly as sets."""
    k = ref_ids.shape[1]
    assert got_ids.shape[1] >= k
    got_ids, got_sims = got_ids[:, :k], got_sims[:, :k]
    # Similarities, in descending order, agree with the reference.
    np.testing.assert_allclose(got_sims, ref_sims, atol=TOL)
    assert np.all(np.diff(got_sims, axis=1) <= TOL)
    exact = 0
    for q in range(len(ref_ids)):
        g, r = set(got_ids[q].tolist()), set(ref_ids[q].tolist())
        if g == r:
            exact += 1
            continue
        kth = ref_sims[q, -1]
        for i in g ^ r:
            assert sim_of is not None, f"query {q}: sets differ {g ^ r} without a near-tie check"
            assert abs(float(sim_of[i][q]) - kth) < TOL, f"query {q}: id {i} is not a near-tie"
    return exact


@pytest.fixture(scope="module")
def random_data() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(20260401)
    base = unit_gaussian(rng, 5000)
    # Non-contiguous, large ids: the index must return the store's ids, not positions.
    ids = rng.choice(10**12, size=5000, replace=False).astype(np.int64)
    queries = unit_gaussian(rng, 1000)
    return ids, base, queries


def test_faiss_equals_sklearn_brute_force(random_data) -> None:
    ids, base, queries = random_data
    index = VectorIndex(dim=DIM).fit(ids, base)
    sims, got = index.search(queries, 10)
    ref_sims, ref_ids = sklearn_topk(base, ids, queries, 10)
    # Gaussian vectors have no exact ties, so every one of the 1,000 queries
    # must give the same ten ids.
    assert assert_same_topk(sims, got, ref_sims, ref_ids) == 1000


def test_allowed_ids_equal_brute_force_over_the_subset(random_data) -> None:
    ids, base, queries = random_data
    index = VectorIndex(dim=DIM).fit(ids, base)
    rng = np.random.default_rng(7)
    mask = rng.random(len(ids)) < 0.1
    sims, got = index.search(queries, 10, allowed_ids=ids[mask])
    ref_sims, ref_ids = sklearn_topk(base[mask], ids[mask], queries, 10)
    assert assert_same_topk(sims, got, ref_sims, ref_ids) == 1000
    assert np.isin(got, ids[mask]).all()


def test_small_subset_pads_with_minus_one(random_data) -> None:
    ids, base, queries = random_data
    index = VectorIndex(dim=DIM).fit(ids, base)
    sims, got = index.search(queries[:5], 10, allowed_ids=ids[:3])
    assert (got[:, 3:] == -1).all()
    assert all(set(row[:3].tolist()) == set(ids[:3].tolist()) for row in got)
    sims, got = index.search(queries[:5], 4, allowed_ids=np.array([], dtype=np.int64))
    assert (got == -1).all() and np.isneginf(sims).all()


def test_upsert_and_remove_match_brute_force(random_data) -> None:
    ids, base, queries = random_data
    rng = np.random.default_rng(11)
    index = VectorIndex(dim=DIM).fit(ids[:3000], base[:3000], fingerprint="a")
    # Replace 200 vectors in place and add 500 new ids.
    changed = ids[:200]
    new_vecs = unit_gaussian(rng, 200)
    index.upsert(changed, new_vecs, fingerprint="b")
    index.upsert(ids[3000:3500], base[3000:3500], fingerprint="c")
    removed = ids[200:400]
    assert index.remove(removed, fingerprint="d") == 200
    assert index.fingerprint_ == "d"
    assert index.ntotal == 3500 - 200
    truth_ids = np.concatenate([ids[:200], ids[400:3500]])
    truth = np.vstack([new_vecs, base[400:3500]])
    sims, got = index.search(queries[:200], 10)
    ref_sims, ref_ids = sklearn_topk(truth, truth_ids, queries[:200], 10)
    assert assert_same_topk(sims, got, ref_sims, ref_ids) == 200
    assert not np.isin(got, removed).any()


def test_save_load_round_trip(random_data, tmp_path: Path) -> None:
    ids, base, queries = random_data
    index = VectorIndex(dim=DIM).fit(ids[:1000], base[:1000], fingerprint="fp1")
    index.save(tmp_path / "ix")
    back = VectorIndex.load(tmp_path / "ix")
    assert back.fingerprint_ == "fp1" and back.ntotal == 1000 and back.dim == DIM
    a, b = index.search(queries[:50], 5), back.search(queries[:50], 5)
    assert np.array_equal(a[1], b[1]) and np.array_equal(a[0], b[0])
    cfg = json.loads((tmp_path / "ix" / "config.json").read_text())
    assert cfg["count"] == 1000 and cfg["dim"] == DIM
    # A config that disagrees with the index file marks it stale.
    cfg["count"] = 999
    (tmp_path / "ix" / "config.json").write_text(json.dumps(cfg))
    assert VectorIndex.load(tmp_path / "ix").fingerprint_ == ""
    with pytest.raises(StoreError, match="no index"):
        VectorIndex.load(tmp_path / "missing")
    (tmp_path / "ix" / "index.faiss").write_bytes(b"not an index")
    # Its size and checksum in the config catch it before FAISS reads it.
    with pytest.raises(StoreError, match=r"damaged: index\.faiss has 12 bytes"):
        VectorIndex.load(tmp_path / "ix")


def test_index_checks_its_input() -> None:
    with pytest.raises(NotFittedError):
        VectorIndex().search(np.zeros((1, DIM), dtype=np.float32), 3)
    with pytest.raises(InputError, match="shape"):
        VectorIndex(dim=DIM).fit(np.arange(2), np.zeros((2, 10), dtype=np.float32))
    with pytest.raises(InputError, match="2 ids for 3 vectors"):
        VectorIndex(dim=DIM).fit(np.arange(2), np.zeros((3, DIM), dtype=np.float32))
    idx = VectorIndex(dim=DIM).fit(np.arange(1), np.ones((1, DIM), dtype=np.float32) / DIM**0.5)
    with pytest.raises(InputError, match="k must be at least 1"):
        idx.search(np.zeros((1, DIM), dtype=np.float32), 0)


def test_fingerprint_is_order_independent() -> None:
    a = [(1, "k1"), (2, "k2"), (3, "k3")]
    assert fingerprint(a) == fingerprint(list(reversed(a)))
    assert fingerprint(a) != fingerprint([(1, "k1"), (2, "k2"), (3, "kX")])
    assert fingerprint(a) != fingerprint(a[:2])


# Workspace: the same search over the store's posts ---------------------------------


@pytest.fixture(scope="module")
def demo_truth(demo_workspace: Workspace):
    """Every demo post with its stored vector, for brute-force references."""
    df = demo_workspace.store.posts_frame()
    vecs = demo_workspace.store.vectors(df["vector_key"].tolist())
    return df, vecs


def _queries(vecs: np.ndarray, n_random: int = 60) -> np.ndarray:
    rng = np.random.default_rng(3)
    # Random directions plus small perturbations of real posts (realistic drafts).
    near = vecs[rng.choice(len(vecs), 40, replace=False)] + 0.05 * unit_gaussian(rng, 40)
    q = np.vstack([unit_gaussian(rng, n_random), near]).astype(np.float32)
    return q / np.linalg.norm(q, axis=1, keepdims=True)


def _check_workspace(
    ws: Workspace,
    df: pd.DataFrame,
    vecs: np.ndarray,
    mask: np.ndarray,
    queries: np.ndarray,
    k: int,
    **filters,
) -> None:
    hits = ws.retrieval.nearest(queries, k, **filters)
    sub_ids = df["pk"].to_numpy()[mask]
    ref_sims, ref_ids = sklearn_topk(vecs[mask], sub_ids, queries, k)
    sim_of = _sim_of(df, vecs, queries)
    kk = ref_ids.shape[1]
    assert all(len(h) == kk for h in hits)
    got_ids = np.array([[p for p, _ in h] for h in hits])
    got_sims = np.array([[s for _, s in h] for h in hits])
    # Exact cosine similarity of every post to every query, for near-tie checks
    # (the demo has one text posted twice, so exact ties exist).
    assert_same_topk(got_sims, got_ids, ref_sims, ref_ids, sim_of)


def test_workspace_search_equals_brute_force(demo_workspace: Workspace, demo_truth) -> None:
    df, vecs = demo_truth
    assert len(df) == demo_workspace.index().ntotal == demo_rows()
    q = _queries(vecs)
    _check_workspace(demo_workspace, df, vecs, np.ones(len(df), bool), q, 10)


@pytest.mark.parametrize("account", ["loomhaven", "loomhaven_events", "loomhaven_lab"])
def test_account_filter_equals_brute_force(demo_workspace: Workspace, demo_truth, account) -> None:
    df, vecs = demo_truth
    mask = (df["account"] == account).to_numpy()
    assert 0 < mask.sum() < len(df)
    _check_workspace(demo_workspace, df, vecs, mask, _queries(vecs), 10, account=account)


def test_date_range_filter_equals_brute_force(demo_workspace: Workspace, demo_truth) -> None:
    df, vecs = demo_truth
    since = datetime(2025, 9, 1, tzinfo=UTC)
    until = datetime(2025, 12, 31, 23, 59, tzinfo=UTC)
    t = df["posted_at"]
    mask = ((t >= pd.Timestamp(since)) & (t <= pd.Timestamp(until))).to_numpy()
    assert 0 < mask.sum() < len(df)
    q = _queries(vecs)
    _check_workspace(demo_workspace, df, vecs, mask, q, 10, since=since, until=until)
    both = mask & (df["account"] == "loomhaven_lab").to_numpy()
    _check_workspace(demo_workspace, df, vecs, both, q, 10, since=since, until=until, account="loomhaven_lab")


def test_precedents_rules(demo_workspace: Workspace, demo_truth) -> None:
    df, _ = demo_truth
    text = df["text"].iloc[100]
    found = demo_workspace.precedents(text, k=5)
    # A stored text is its own nearest neighbour at cosine 1.
    assert found[0].text == text and found[0].similarity == pytest.approx(1.0, abs=1e-4)
    sims = [p.similarity for p in found]
    assert sims == sorted(sims, reverse=True) and len(found) == 5
    with pytest.raises(InputError, match="k must be between"):
        demo_workspace.precedents(text, k=0)
    with pytest.raises(InputError, match="ends before it starts"):
        demo_workspace.precedents(
            text, since=datetime(2026, 1, 2, tzinfo=UTC), until=datetime(2026, 1, 1, tzinfo=UTC)
        )
    with pytest.raises(NotFound, match="unknown account 'nobody'"):
        demo_workspace.precedents(text, account="nobody")
    with pytest.raises(InputError, match="empty"):
        demo_workspace.precedents("   ")


# Rebuilding and staleness ------------------------------------------------------------


def _search(ws: Workspace, q: np.ndarray) -> list[list[tuple[int, float]]]:
    return ws.retrieval.nearest(q, 10)


def _same(a, b, sim_of) -> None:
    """Same answers, ties aside (the demo's repeated texts share a vector, so
    their order among equal similarities may differ after a rebuild)."""
    ids = [np.array([[p for p, _ in r] for r in x]) for x in (a, b)]
    sims = [np.array([[s for _, s in r] for r in x]) for x in (a, b)]
    assert_same_topk(sims[1], ids[1], sims[0], ids[0], sim_of)


def _sim_of(df: pd.DataFrame, vecs: np.ndarray, q: np.ndarray) -> dict[int, np.ndarray]:
    return dict(zip(df["pk"].tolist(), vecs.astype(np.float64) @ q.T.astype(np.float64), strict=True))


def test_deleted_index_is_rebuilt_with_same_results(
    demo_copy: Workspace, demo_truth, embedder: Embedder
) -> None:
    df, vecs = demo_truth
    q = _queries(vecs)
    sim_of = _sim_of(df, vecs, q)
    before = _search(demo_copy, q)
    shutil.rmtree(demo_copy.settings.index_dir)
    assert demo_copy.index_state()["state"] == "missing"
    demo_copy.reindex()
    _same(before, _search(demo_copy, q), sim_of)
    assert demo_copy.index_state() == {"state": "ready", "count": len(df)}
    # A fresh workspace over a data directory without an index rebuilds it on first use.
    shutil.rmtree(demo_copy.settings.index_dir)
    fresh = Workspace(settings=Settings(home=demo_copy.settings.home), embedder=embedder)
    try:
        _same(before, _search(fresh, q), sim_of)
        assert health_of(fresh).model_dump()["index"]["state"] == "ready"
        # A corrupt index file is rebuilt too, not a crash.
        (fresh.settings.index_dir / "index.faiss").write_bytes(b"garbage")
        third = Workspace(settings=Settings(home=demo_copy.settings.home), embedder=embedder)
        _same(before, _search(third, q), sim_of)
        third.close()
    finally:
        fresh.close()


def test_stale_index_is_detected_and_rebuilt(
    demo_copy: Workspace, demo_truth, embedder: Embedder, tmp_path: Path
) -> None:
    df, vecs = demo_truth
    ws1 = demo_copy
    ws1.index()
    assert health_of(ws1).model_dump()["index"]["state"] == "ready"
    ws2 = Workspace(settings=Settings(home=ws1.settings.home), embedder=embedder)
    try:
        # Another process deletes a post through the store alone: the index on disk is stale.
        victim = df.iloc[500]
        ws2.store.forget(account=victim["account"], post_id=victim["post_id"])
        assert health_of(ws1).model_dump()["index"]["state"] == "stale"
        assert health_of(ws2).model_dump()["index"]["state"] == "stale"
        # ws1's next search notices, rebuilds, and never returns the deleted post.
        hits = ws1.retrieval.nearest(vecs[500:501], 3)[0]
        assert int(victim["pk"]) not in [p for p, _ in hits]
        assert health_of(ws1).model_dump()["index"] == {"state": "ready", "count": len(df) - 1}

        # Another workspace imports a new post: ws1's in-memory index picks it up.
        text = "A brand-new post about the midnight cactus bloom that nobody has seen before."
        (tmp_path / "new.csv").write_text(
            f"post_id,account,text,posted_at,impressions\nnew-1,loomhaven,{text},2026-10-30T10:00:00Z,10\n"
        )
        assert ws2.import_csv(tmp_path / "new.csv", ImportOptions(new_accounts="UTC")).added == 1
        q = embedder.encode([text])
        pk, sim = ws1.retrieval.nearest(q, 1)[0][0]
        assert ws1.store.posts_by_pk([pk])[pk]["post_id"] == "new-1"
        assert sim == pytest.approx(1.0, abs=1e-4)
        assert health_of(ws1).model_dump()["index"] == {"state": "ready", "count": len(df)}

        # A changed text (same post id) moves the post in ws1's search too.
        (tmp_path / "edit.csv").write_text(
            "post_id,account,text,posted_at,impressions\n"
            "new-1,loomhaven,Entirely different words about parking charges.,"
            "2026-10-30T10:00:00Z,10\n"
        )
        assert ws2.import_csv(tmp_path / "edit.csv", ImportOptions(new_accounts="UTC")).updated == 1
        pk2, sim2 = ws1.retrieval.nearest(q, 1)[0][0]
        assert pk2 != pk or sim2 < 0.9
    finally:
        ws2.close()


def test_forget_updates_store_and_index(demo_copy: Workspace, demo_truth) -> None:
    df, vecs = demo_truth
    before = demo_copy.store.counts()
    victim = df.iloc[42]
    assert demo_copy.forget(account=victim["account"], post_id=victim["post_id"]) == 1
    after = demo_copy.store.counts()
    assert after["posts"] == before["posts"] - 1
    assert after["snapshots"] < before["snapshots"]
    hits = demo_copy.retrieval.nearest(vecs[42:43], 5)[0]
    assert int(victim["pk"]) not in [p for p, _ in hits]
    assert demo_copy.index_state() == {"state": "ready", "count": len(df) - 1}
    n = demo_copy.forget(account="loomhaven_lab")
    assert n == int((df["account"] == "loomhaven_lab").sum()) - (victim["account"] == "loomhaven_lab")
    assert "loomhaven_lab" not in {a.handle for a in demo_copy.store.accounts()}
    assert demo_copy.index().ntotal == len(df) - 1 - n
    with pytest.raises(NotFound):
        demo_copy.forget(post_id="no-such-post")
    with pytest.raises(InputError, match="say which"):
        demo_copy.forget()
