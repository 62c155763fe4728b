"""The keyword index (service.storage.keywords) and its fusion with the vectors
(service.history.fusion, service.history.match_modes), on SQLite (FTS5) and PostgreSQL (tsvector).

Scores are checked against the published formulas computed by hand here:
Okapi BM25 (Robertson & Spärck Jones; the variant FTS5 documents at
https://sqlite.org/fts5.html#the_bm25_function: k1 = 1.2, b = 0.75,
idf = ln((N - n + 0.5) / (n + 0.5)), a non-positive idf taken as 1e-6 (that
last detail from FTS5's source, from memory), returned negated by bm25()),
and reciprocal rank fusion (Cormack, Clarke & Büttcher, SIGIR 2009:
score = sum over rankings of 1 / (60 + rank)).
"""

from __future__ import annotations

import json
import math
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest
from conftest import history_csv
from fastapi.testclient import TestClient
from sqlalchemy import create_engine, text
from storage.test_migrations import make_v0_store

from service.api.app import create_app
from service.history.fusion import rrf
from service.history.match_modes import Match
from service.ingest.options import ImportOptions
from service.storage import keywords
from service.storage.post_writes import PostRow
from service.storage.store import Store
from service.workspace import Workspace

T0 = datetime(2026, 3, 1, 9, tzinfo=UTC)

# Plain space-separated lower-case tokens, so the counts below are str.split().
CORPUS = [
    "#seedswap at the potting shed the seeds swap",
    "the lake path reopens",
    "bulbs bulbs bulbs for the #seedswap table",
    "@loomhaven_lab counted 1,200 bulbs",
    "magnolias by the lake",
]


def rows_of(texts: list[str], prefix: str = "p") -> list[PostRow]:
    return [
        PostRow(
            account="loomhaven",
            post_id=f"{prefix}{i}",
            text=t,
            posted_at=T0 + timedelta(hours=i),
            metrics={"impressions": 100 + i},
            has_media=False,
            vector_key=f"k-{prefix}{i}",
        )
        for i, t in enumerate(texts)
    ]


def stored(url: str, texts: list[str]) -> tuple[Store, dict[str, int]]:
    store = Store(url=url)
    rows = rows_of(texts)
    vecs = {r.vector_key: np.full(4, 0.5, dtype=np.float32) for r in rows}
    store.write_batch(rows, vecs, model_id="test")
    pks = {str(r["post_id"]): int(r["pk"]) for _, r in store.posts_frame().iterrows()}
    return store, pks


def search(store: Store, query: str, k: int = 10) -> list[tuple[int, float]]:
    with store.engine.connect() as conn:
        return keywords.search(conn, query, k)


def hand_bm25(query: list[str], docs: list[list[str]]) -> list[float]:
    """Okapi BM25 of every document, written out from the formula."""
    n_docs = len(docs)
    avgdl = sum(len(d) for d in docs) / n_docs
    out = []
    for d in docs:
        score = 0.0
        for q in query:
            tf = d.count(q)
            if tf == 0:
                continue
            n = sum(1 for other in docs if q in other)
            idf = math.log((n_docs - n + 0.5) / (n + 0.5))
            idf = idf if idf > 0 else 1e-6
            score += idf * tf * (1.2 + 1) / (tf + 1.2 * (1 - 0.75 + 0.75 * len(d) / avgdl))
        out.append(score)
    return out


def test_words_keep_hashtags_mentions_and_numbers() -> None:
    got = keywords.words("Join the #SeedSwap with @Loomhaven_Lab: 1,200 bulbs, 3.5 kg, 40% off!")
    assert got == [
        "join", "the", "#seedswap", "with", "@loomhaven_lab", "1,200", "bulbs", "3.5", "kg", "40%", "off",
    ]  # fmt: skip
    assert keywords.hashtags("#Ferns and #ferns, #FernHouse") == ["#ferns", "#fernhouse"]


def test_bm25_equals_the_formula_by_hand(database_url: str) -> None:
    store, pks = stored(database_url, CORPUS)
    try:
        query = ["#seedswap", "bulbs", "the"]  # "the" is in 4 of 5 posts: a negative idf, taken as 1e-6
        expected = hand_bm25(query, [d.split() for d in CORPUS])
        got = dict(search(store, " ".join(query)))
        for i, want in enumerate(expected):
            if want > 0:
                assert got[pks[f"p{i}"]] == pytest.approx(want, rel=1e-9), CORPUS[i]
            else:
                assert pks[f"p{i}"] not in got
        # "#seedswap" is its own term: "seedswap" alone matches nothing.
        assert search(store, "seedswap") == []
        assert [pk for pk, _ in search(store, "@loomhaven_lab 1,200")] == [pks["p3"]]
    finally:
        store.close()


def test_forget_and_rewording_keep_the_index_in_step(database_url: str) -> None:
    store, pks = stored(database_url, CORPUS)
    try:
        assert {pk for pk, _ in search(store, "#seedswap")} == {pks["p0"], pks["p2"]}
        store.forget(post_id="p2")
        assert {pk for pk, _ in search(store, "#seedswap")} == {pks["p0"]}
        # A re-import with new text replaces the post's words.
        row = rows_of(["snowdrops by the gate"])[0]
        store.write_batch([row], {row.vector_key: np.full(4, 0.5, dtype=np.float32)}, model_id="test")
        assert search(store, "#seedswap") == []
        assert [pk for pk, _ in search(store, "snowdrops")] == [pks["p0"]]
        store.forget(account="loomhaven")
        assert search(store, "lake") == []
    finally:
        store.close()


def test_an_older_store_gets_its_keyword_index_built(database_url: str) -> None:
    make_v0_store(database_url)  # one post, "Snowdrops by the lake", with no keyword index
    store = Store(url=database_url)
    try:
        assert [pk for pk, _ in search(store, "Snowdrops")] == [1]
    finally:
        store.close()
    eng = create_engine(database_url)
    with eng.connect() as c:
        assert c.scalar(text(f"SELECT count(*) FROM {keywords.TABLE}")) == 1
    eng.dispose()


def test_rrf_equals_its_formula() -> None:
    # Cormack, Clarke & Büttcher 2009: RRFscore(d) = sum_r 1 / (k + r(d)), k = 60.
    got = dict(rrf([[11, 12, 13], [13, 11, 14]]))
    assert got[11] == pytest.approx(1 / 61 + 1 / 62)
    assert got[12] == pytest.approx(1 / 62)
    assert got[13] == pytest.approx(1 / 63 + 1 / 61)
    assert got[14] == pytest.approx(1 / 63)
    assert [d for d, _ in rrf([[11, 12, 13], [13, 11, 14]])] == [11, 13, 12, 14]
    assert rrf([[5, 6]], k=1) == [(5, 1 / 2), (6, 1 / 3)]


HASHTAG_POST = "Thanks to everyone who turned out on Saturday, what a crowd! #seedswap"
DRAFT = "Winter coats and scarves recommended, it is chilly by the water #seedswap"


def with_posts(ws: Workspace, tmp_path: Path, *rows: str) -> Workspace:
    """``ws`` with history_csv(48) and the extra CSV ``rows`` (post_id, account,
    text, posted_at, impressions) imported."""
    path = tmp_path / "with-posts.csv"
    path.write_bytes(history_csv(48) + "".join(r + "\n" for r in rows).encode())
    ws.import_csv(path, ImportOptions(new_accounts="UTC"))
    return ws


@pytest.fixture()
def tagged(workspace, tmp_path):  # type: ignore[no-untyped-def]
    return with_posts(workspace, tmp_path, f'tag-1,loomhaven,"{HASHTAG_POST}",2025-03-20T10:00:00+00:00,90')


def test_a_hashtag_only_match_that_the_vectors_miss_is_found_by_both(tagged) -> None:  # type: ignore[no-untyped-def]
    # The one post with the hashtag, counted independently of the index.
    frame = tagged.store.posts_frame()
    assert frame[frame["text"].str.contains("#seedswap")]["post_id"].tolist() == ["tag-1"]

    meaning = [p.post_id for p in tagged.precedents(DRAFT, k=5)]
    assert "tag-1" not in meaning  # the sentence model reads the weather, not the hashtag
    both = [p.post_id for p in tagged.precedents(DRAFT, k=5, match=Match.BOTH)]
    assert "tag-1" in both
    words = tagged.precedents(DRAFT, k=5, match=Match.WORDS)
    assert words[0].post_id == "tag-1"
    # The similarity shown stays the cosine, whichever way the post was found.
    cosines = {p.post_id: p.similarity for p in tagged.precedents(DRAFT, k=49)}
    assert words[0].similarity == pytest.approx(cosines["tag-1"], abs=1e-4)


def test_the_api_takes_the_match_field(tagged) -> None:  # type: ignore[no-untyped-def]
    with TestClient(create_app(workspace=tagged)) as c:
        r = c.post("/v1/precedents", json={"text": DRAFT, "k": 3, "match": "words"})
        assert r.status_code == 200
        assert r.json()["precedents"][0]["post_id"] == "tag-1"
        bad = c.post("/v1/precedents", json={"text": DRAFT, "match": "sound"})
        assert bad.status_code == 422
        assert "match" in bad.text


def test_the_cli_takes_match(tagged, embedder, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    from typer.testing import CliRunner

    from service.cli import app
    from service.cli.base import use_embedder

    use_embedder(embedder)
    monkeypatch.setenv("SOUNDING_HOME", str(tagged.settings.home))
    tagged.close()  # the command opens the directory itself
    runner = CliRunner()
    r = runner.invoke(app, ["precedents", DRAFT, "-k", "3", "--match", "words", "--json"])
    assert r.exit_code == 0, r.output
    assert json.loads(r.stdout)["precedents"][0]["post_id"] == "tag-1"
    bad = runner.invoke(app, ["precedents", DRAFT, "--match", "sound"])
    assert bad.exit_code != 0 and "--match" in bad.output and "Traceback" not in bad.output


def test_a_copied_store_gets_the_same_keyword_scores(tmp_path, database_url: str) -> None:  # type: ignore[no-untyped-def]
    from service.storage.copying import copy_store

    src, _ = stored(f"sqlite:///{tmp_path / 'source.db'}", CORPUS)
    dest = Store(url=database_url)
    try:
        copied = copy_store(src, dest)
        assert copied[keywords.TABLE] == len(CORPUS)
        want = search(src, "#seedswap bulbs lake")
        got = search(dest, "#seedswap bulbs lake")
        assert [pk for pk, _ in got] == [pk for pk, _ in want]
        assert [s for _, s in got] == pytest.approx([s for _, s in want], rel=1e-9)
    finally:
        src.close()
        dest.close()
