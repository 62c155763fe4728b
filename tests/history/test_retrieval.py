"""One retrieval: a stored post sent as a draft at its own time, against the
same history, gets exactly its training feature row; forgotten posts never
come back as precedents or near-repeats."""

from __future__ import annotations

from datetime import timedelta

import numpy as np
from conftest import NOW

from models.features import FEATURE_NAMES
from service.forecast.draft import Draft
from service.history.retrieval import Retriever
from service.history.view import build_view, feature_params


def test_a_stored_post_as_a_draft_gets_its_training_row(demo_workspace) -> None:
    ws = demo_workspace
    params = feature_params(ws.settings)
    view = build_view(ws.store, "impressions", with_vectors=True)
    X = Retriever.training_matrix(view, params)
    served = ws.forecaster.view("impressions")  # the forecast's own view (no vectors)
    assert np.array_equal(served.history.pk, view.history.pk)
    rng = np.random.default_rng(7)
    picks = rng.choice(np.arange(len(view.history) // 2, len(view.history)), 12, replace=False)
    for i in picks:
        rec = view.frame.iloc[i]
        draft = Draft(
            text=str(rec["text"]),
            account=str(rec["account"]),
            planned_at=rec["posted_at"].to_pydatetime(),
            has_media=bool(rec["has_media"]),
        )
        x, *_ = ws.forecaster.features(served, params, draft, view.history.vectors[i], now=NOW)
        # The same neighbours by the same rule: equal up to float32 summation order
        # (FAISS and numpy add the 384 products in different orders).
        np.testing.assert_allclose(x[0], X[i], rtol=1e-5, atol=1e-6, equal_nan=True)
        # Counts and flags match exactly, not approximately.
        for name in ("team_n_similar", "own_n_similar", "baseline_n", "has_media", "has_link"):
            j = FEATURE_NAMES.index(name)
            assert x[0][j] == X[i][j], (name, i)


def test_forgotten_posts_never_return(demo_copy) -> None:
    ws = demo_copy
    frame = ws.store.posts_frame()
    rec = frame[frame["account"] == "loomhaven"].iloc[-40]
    text, posted = str(rec["text"]), rec["posted_at"].to_pydatetime()
    at = posted + timedelta(days=2)
    draft = Draft(text=text, account="loomhaven", planned_at=at)
    before = ws.forecaster.forecast([draft], now=at)[0]
    # Its own text right after it: it is the top precedent and a near-repeat.
    assert before.precedents[0].post_id == rec["post_id"]
    assert rec["post_id"] in [r.post_id for r in before.repeats]
    assert ws.forget(account="loomhaven", post_id=str(rec["post_id"])) == 1
    after = ws.forecaster.forecast([draft], now=at)[0]
    assert rec["post_id"] not in [p.post_id for p in after.precedents]
    assert rec["post_id"] not in [r.post_id for r in after.repeats]
    assert all(rec["post_id"] not in w for w in after.warnings)
    hits = ws.retrieval.nearest(ws.embedder.encode([text]), 5)[0]
    assert int(rec["pk"]) not in [pk for pk, _ in hits]
