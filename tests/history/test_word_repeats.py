"""Near-repeats by words (service.history.word_repeats): a draft that repeats
an earlier post's hashtags and wording in another order, which the sentence
model scores below the cosine threshold, is warned about with ``words`` and
``both``, not with ``meaning``; the share it shows is the BM25 ratio worked
out by hand."""

from __future__ import annotations

import csv
import json
from datetime import UTC, datetime, timedelta

import numpy as np
import pytest
from fastapi.testclient import TestClient
from history.test_keywords import CORPUS, hand_bm25, stored, with_posts
from support.serving import serve
from typer.testing import CliRunner

from service.api.app import create_app
from service.client import SoundingClient
from service.history.match_modes import Match
from service.history.repeats import near_repeats
from service.history.view import build_view
from service.history.word_repeats import MIN_SHARED, words_above
from service.plan import forecast_plan
from service.storage import keywords

EARLIER = "Volunteers wanted for the #seedswap on 14 March, sign up at the shed #loomhaven"
# The same words, hashtags and date in another order: the vectors read it as a
# different sentence (cosine below the 0.93 threshold, asserted below).
DRAFT = "Sign up at the shed! Wanted: volunteers for the #loomhaven #seedswap on 14 March"
SHORT = "#seedswap"  # shares one hashtag with the draft and nothing else
PLANNED = datetime(2025, 2, 12, 9, tzinfo=UTC)


@pytest.fixture()
def reworded(workspace, tmp_path):  # type: ignore[no-untyped-def]
    return with_posts(
        workspace,
        tmp_path,
        f'rep-1,loomhaven,"{EARLIER}",2025-02-10T10:00:00+00:00,90',
        f'rep-2,loomhaven,"{SHORT}",2025-02-11T10:00:00+00:00,80',
    )


def _repeats(ws, match: Match):  # type: ignore[no-untyped-def]
    view = build_view(ws.store, "impressions", with_vectors=False)
    vec = ws.embedder.encode([DRAFT])[0]
    return near_repeats(
        ws.retrieval, ws.settings, view, account="loomhaven", vector=vec, planned=PLANNED,
        now=PLANNED, text=DRAFT, match=match,
    )  # fmt: skip


def _docs(ws):  # type: ignore[no-untyped-def]
    """Every indexed post's tokens by row id, read from the posts table."""
    frame = ws.store.posts_frame()
    return {int(pk): keywords.words(t) for pk, t in zip(frame["pk"], frame["text"], strict=True)}


def test_the_words_share_is_the_bm25_ratio_by_hand(reworded) -> None:  # type: ignore[no-untyped-def]
    # Okapi BM25 as FTS5 documents it (hand_bm25, written from the formula in
    # test_keywords): share = BM25(draft's terms, post) / BM25(post's terms, post).
    docs = _docs(reworded)
    pks = sorted(docs)
    target = pks.index(int(reworded.store.posts_frame().set_index("post_id").loc["rep-1", "pk"]))
    view = build_view(reworded.store, "impressions", with_vectors=False)
    rows = np.arange(len(view.history))
    for draft in (DRAFT, "volunteers wanted at the #seedswap, more soon"):
        q = list(dict.fromkeys(keywords.words(draft)))
        own = list(dict.fromkeys(docs[pks[target]]))
        want = hand_bm25(q, [docs[p] for p in pks])[target] / hand_bm25(own, [docs[p] for p in pks])[target]
        got = dict(words_above(reworded.retrieval, view, draft, rows, 0.0))
        row = int(np.flatnonzero(view.history.pk == pks[target])[0])
        assert got[row] == pytest.approx(min(1.0, want), rel=1e-9)
    assert want < 0.8  # the shorter draft repeats too little of the post to be warned


def test_self_scores_equal_the_formula_by_hand(database_url: str) -> None:
    # A post's self-score: Okapi BM25 (hand_bm25, from the formula) of its own
    # distinct terms on itself, on SQLite (FTS5's bm25) and PostgreSQL alike.
    store, pks = stored(database_url, CORPUS)
    try:
        with store.engine.connect() as conn:
            got = keywords.self_scores(conn, list(pks.values()))
        docs = [d.split() for d in CORPUS]
        for i, d in enumerate(docs):
            want = hand_bm25(list(dict.fromkeys(d)), docs)[i]
            assert got[pks[f"p{i}"]] == pytest.approx(want, rel=1e-9), CORPUS[i]
    finally:
        store.close()


def test_a_reworded_repeat_is_warned_by_words_and_both_not_by_meaning(reworded) -> None:  # type: ignore[no-untyped-def]
    vec = reworded.embedder.encode([DRAFT, EARLIER])
    assert float(vec[0] @ vec[1]) < reworded.settings.repeat_similarity  # the vectors miss it
    assert [r.post_id for r in _repeats(reworded, Match.MEANING)] == []
    for match in (Match.WORDS, Match.BOTH):
        found = _repeats(reworded, match)
        assert [r.post_id for r in found] == ["rep-1"], match
        assert found[0].scope == "own"
        assert found[0].words_share == pytest.approx(1.0)  # every term of the post is in the draft
        assert found[0].similarity == pytest.approx(float(vec[0] @ vec[1]), abs=1e-4)  # still the cosine
        assert "100% of its words" in found[0].message


def test_one_shared_hashtag_never_makes_a_repeat(reworded) -> None:  # type: ignore[no-untyped-def]
    # "#seedswap" alone scores its whole self-score on the draft (share 1), but
    # shares fewer than MIN_SHARED terms with it.
    assert len(set(keywords.words(SHORT)) & set(keywords.words(DRAFT))) < MIN_SHARED
    assert "rep-2" not in [r.post_id for r in _repeats(reworded, Match.WORDS)]


def test_a_draft_after_its_window_is_not_warned(reworded) -> None:  # type: ignore[no-untyped-def]
    view = build_view(reworded.store, "impressions", with_vectors=False)
    vec = reworded.embedder.encode([DRAFT])[0]
    late = PLANNED.replace(month=5)  # past the 45-day window of the same account
    found = near_repeats(
        reworded.retrieval, reworded.settings, view, account="loomhaven", vector=vec, planned=late,
        now=late, text=DRAFT, match=Match.BOTH,
    )  # fmt: skip
    assert found == []


@pytest.fixture(scope="module")
def shuffled(demo_workspace):  # type: ignore[no-untyped-def]
    return shuffled_repeat(demo_workspace)


def shuffled_repeat(demo_workspace):  # type: ignore[no-untyped-def]
    """A demo post and a draft of its words backwards, which the vectors score
    below the cosine threshold: (account, post id, draft, planned time)."""
    frame = demo_workspace.store.posts_frame().sort_values("posted_at").iloc[1000:1040]
    drafts = [" ".join(reversed(keywords.words(t))) for t in frame["text"]]
    vecs = demo_workspace.embedder.encode(list(frame["text"]) + drafts)
    n = len(drafts)
    cos = np.einsum("ij,ij->i", vecs[:n], vecs[n:])
    i = int(np.flatnonzero(cos < demo_workspace.settings.repeat_similarity - 0.03)[0])
    row = frame.iloc[i]
    planned = row["posted_at"].to_pydatetime() + timedelta(hours=20)
    return str(row["account"]), str(row["post_id"]), drafts[i], planned


def test_the_api_cli_and_plan_take_match(
    shuffled, demo_workspace, demo_home, embedder, monkeypatch, tmp_path
) -> None:  # type: ignore[no-untyped-def]
    account, post_id, draft, planned = shuffled
    body = {"text": draft, "account": account, "planned_at": planned.isoformat(), "record": False}
    with TestClient(create_app(workspace=demo_workspace)) as c:
        found = {}
        for match in Match:
            r = c.post("/v1/forecasts", json={**body, "match": match.value})
            assert r.status_code == 200, r.text
            found[match] = [x["post_id"] for x in r.json()["repeats"]]
        assert post_id not in found[Match.MEANING]
        assert post_id in found[Match.WORDS] and post_id in found[Match.BOTH]
        assert post_id not in c.post("/v1/forecasts", json=body).json()["repeats"]  # meaning by default
        one = {k: v for k, v in body.items() if k != "record"}
        batch = c.post("/v1/forecasts", json={"drafts": [one], "record": False, "match": "words"})
        assert batch.status_code == 200, batch.text
        assert post_id in [x["post_id"] for x in batch.json()["forecasts"][0]["repeats"]]
        bad = c.post("/v1/forecasts", json={**body, "match": "sound"})
        assert bad.status_code == 422 and "match" in bad.text
        # The other answers that warn: the best hours of a later day, and compared versions.
        day = (planned + timedelta(days=1)).date().isoformat()
        for match, warned in ((Match.MEANING, False), (Match.WORDS, True)):
            hours = c.post("/v1/hours", json={"text": draft, "account": account, "day": day, "match": match})
            assert hours.status_code == 200, hours.text
            assert any(post_id in w for w in hours.json()["warnings"]) is warned, match
            versions = {"texts": [draft, "Something else entirely"], "account": account}
            compared = c.post(
                "/v1/variants", json={**versions, "planned_at": body["planned_at"], "match": match}
            )
            assert compared.status_code == 200, compared.text
            first = next(v for v in compared.json()["variants"] if v["text"] == draft)
            assert any(post_id in w for w in first["warnings"]) is warned, match

    with serve(create_app(workspace=demo_workspace)) as url, SoundingClient(base_url=url, timeout=60.0) as sc:
        got = sc.forecast(draft, account=account, planned_at=planned, match="words")
        assert post_id in [r.post_id for r in got.repeats]
        plain = sc.forecast_plan([{"text": draft, "account": account, "planned_at": planned}])
        assert post_id not in [r.post_id for r in plain[0].repeats]
        day = (planned + timedelta(days=1)).date()
        for match, warned in (("meaning", False), ("words", True)):
            hours = sc.best_hours(draft, account=account, day=day, match=match)
            assert any(post_id in w for w in hours.warnings) is warned, match
            versions = sc.compare(
                [draft, "Something else entirely"], account=account, planned_at=planned, match=match
            )
            first = next(v for v in versions.variants if v.text == draft)
            assert any(post_id in w for w in first.warnings) is warned, match
            chosen = sc.choose_account(draft, accounts=[account], planned_at=planned, match=match)
            assert any(post_id in w for a in chosen.accounts for w in a.warnings) is warned, match

    from service.cli import app
    from service.cli.base import use_embedder

    use_embedder(embedder)
    monkeypatch.setenv("SOUNDING_HOME", str(demo_home))
    runner = CliRunner()
    args = ["check", draft, "--account", account, "--at", planned.isoformat(), "--no-record"]
    res = runner.invoke(app, [*args, "--match", "words", "--json"])
    assert res.exit_code == 0, res.output
    assert post_id in [x["post_id"] for x in json.loads(res.stdout)["repeats"]]
    bad_cli = runner.invoke(app, [*args, "--match", "sound"])
    assert bad_cli.exit_code != 0 and "--match" in bad_cli.output and "Traceback" not in bad_cli.output

    plan = tmp_path / "plan.csv"
    plan.write_text(
        f'draft_id,account,text,planned_at\nd1,{account},"{draft}",{planned.isoformat()}\n', encoding="utf-8"
    )
    for match, warned in ((Match.MEANING, False), (Match.BOTH, True)):
        dest = tmp_path / f"out-{match}.csv"
        forecast_plan(demo_workspace, plan, dest, record=False, match=match)
        with dest.open(encoding="utf-8", newline="") as f:
            line = next(csv.DictReader(f))  # RFC 4180 reader
        assert (post_id in line["warnings"]) is warned, match
