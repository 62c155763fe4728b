"""Topic segments find their posts through the one retrieval component
(``service.history.retrieval.Retriever``: ``similarities`` for nearest mode,
``nearest`` for top-k mode) and get exactly the members that an independent
computation gives: scikit-learn's ``cosine_similarity`` over the vectors as
the store holds them (not as the index holds them), named beside each check.
Both index kinds are covered: the exact scan and the HNSW graph."""

from __future__ import annotations

import json
import shutil
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest
from sklearn.metrics.pairwise import cosine_similarity

from models.errors import StoreError
from models.index import VectorIndex
from models.segments import OTHER
from service.segments.request import SegmentRequest
from service.segments.segmenting import segment
from service.settings import Settings
from service.workspace import Workspace

ROOT = Path(__file__).resolve().parents[2]
EFFECTS = json.loads((ROOT / "demo_data" / "effects.json").read_text())
PHRASES = [EFFECTS["topic_phrases"][t][0] for t in EFFECTS["topic_order_strongest_first"]]
THRESHOLD = 0.3  # the default threshold of nearest mode


def _unit(rng: np.random.Generator, n: int, d: int) -> np.ndarray:
    v = rng.normal(size=(n, d)).astype(np.float32)
    return v / np.linalg.norm(v, axis=1, keepdims=True)


@pytest.fixture(scope="module")
def hnsw_workspace(
    demo_home: Path, embedder, tmp_path_factory: pytest.TempPathFactory
) -> Iterator[Workspace]:
    """A private copy of the demo data directory, its index rebuilt as an HNSW graph."""
    home = tmp_path_factory.mktemp("hnsw") / "home"
    shutil.copytree(demo_home, home)
    ws = Workspace(settings=Settings(home=home, index_approximate_above=1), embedder=embedder)
    assert ws.reindex().approximate
    yield ws
    ws.close()


@pytest.fixture(params=["demo_workspace", "hnsw_workspace"])
def ws(request: pytest.FixtureRequest) -> Workspace:
    """The demo history behind an exact index, or behind an HNSW graph."""
    workspace: Workspace = request.getfixturevalue(request.param)
    assert workspace.index().approximate == (request.param == "hnsw_workspace")
    return workspace


def _reference(ws: Workspace, embedder, phrases: list[str]) -> tuple[list[str], np.ndarray]:
    """Post ids (oldest first, as segments reads them) and each post's cosine
    similarity to each phrase, from the store's own vectors.
    Reference: scikit-learn cosine_similarity (it normalises rows itself)."""
    frame = ws.store.posts_frame()
    vectors = ws.store.vectors(list(frame["vector_key"]))
    return list(frame["post_id"]), cosine_similarity(vectors, embedder.encode(phrases))


def test_vectors_of_returns_the_stored_vectors_in_the_order_asked() -> None:
    rng = np.random.default_rng(3)
    ids = rng.permutation(np.arange(1000, 1300)).astype(np.int64)
    vecs = _unit(rng, len(ids), 16)
    ask = ids[[7, 0, 299, 42]]
    for approximate_above in (None, 1):
        index = VectorIndex(dim=16, approximate_above=approximate_above).fit(ids, vecs)
        # Reference: the input array itself, row by row.
        np.testing.assert_array_equal(index.vectors_of(ask), vecs[[7, 0, 299, 42]])
        index.remove(ids[:1], fingerprint="")
        with pytest.raises(StoreError, match="reindex"):
            index.vectors_of(ids[:2])  # a forgotten post is not scored
        with pytest.raises(StoreError):
            index.vectors_of(np.array([5], dtype=np.int64))  # never held


def test_similarities_score_given_posts_like_numpy(ws: Workspace, embedder) -> None:
    frame = ws.store.posts_frame()
    rng = np.random.default_rng(5)
    pick = rng.choice(len(frame), size=50, replace=False)
    pks = frame["pk"].to_numpy(np.int64)[pick]
    queries = embedder.encode(PHRASES[:2])
    got = ws.retrieval.similarities(queries, pks)
    # Reference: plain numpy dot products of the store's vectors (unit length).
    want = ws.store.vectors(list(frame["vector_key"].iloc[pick])) @ queries.T
    assert got.shape == (50, 2)
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-6)


def test_nearest_mode_members_match_exact_cosine(ws: Workspace, embedder) -> None:
    result = segment(ws, SegmentRequest(topics=PHRASES, n_resamples=100))
    post_ids, sims = _reference(ws, embedder, PHRASES)
    assert result.n_posts == len(post_ids)  # every demo post is mature and has impressions
    best = sims.argmax(axis=1)
    want = np.where(sims.max(axis=1) >= THRESHOLD, np.asarray(PHRASES, dtype=object)[best], OTHER)
    got = result.split("topic").labels
    assert isinstance(got, np.ndarray)
    np.testing.assert_array_equal(got, want)  # each post in the same segment
    assert len(set(want)) == len(PHRASES) + 1  # every topic and "other" caught posts


def test_top_k_mode_members_match_exact_cosine(ws: Workspace, embedder) -> None:
    k = 150
    phrases = PHRASES[:3]
    result = segment(ws, SegmentRequest(topics=phrases, mode="top-k", k=k, n_resamples=100))
    post_ids, sims = _reference(ws, embedder, phrases)
    members = result.split("topic").labels
    assert not isinstance(members, np.ndarray)
    in_any = np.zeros(len(post_ids), dtype=bool)
    for j, name in enumerate(phrases):
        rows = np.asarray(members[name])
        assert len(rows) == k
        kth = np.sort(sims[:, j])[::-1][k - 1]  # reference: the k-th largest similarity
        inside = np.zeros(len(post_ids), dtype=bool)
        inside[rows] = True
        # Above the k-th similarity a post is in; below it, out (float32 slack only).
        assert inside[sims[:, j] > kth + 1e-6].all()
        assert not inside[sims[:, j] < kth - 1e-6].any()
        in_any |= inside
    np.testing.assert_array_equal(np.sort(members[OTHER]), np.flatnonzero(~in_any))
