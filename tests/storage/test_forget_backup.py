"""Forgetting removes a post or an account everywhere (posts, snapshots,
vectors, index), and a backup taken while imports go on is a complete,
consistent, restorable store."""

from __future__ import annotations

import csv
import shutil
import sqlite3
import threading
from collections.abc import Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pandas as pd
import pytest
from conftest import TOKEN
from fastapi.testclient import TestClient
from typer.testing import CliRunner

from service.api.app import create_app
from service.cli import app as cli_app
from service.cli.base import use_embedder
from service.ingest.options import ImportOptions
from service.settings import Settings
from service.workspace import Workspace

AUTH = {"Authorization": f"Bearer {TOKEN}"}
ACCOUNTS = ("loomhaven", "loomhaven_events", "loomhaven_lab")
SHARED = "Free entry for members all weekend, bring a friend."
PLANTS = [
    "Magnolias",
    "Camellias",
    "Snowdrops",
    "Hellebores",
    "Tulips",
    "Bluebells",
    "Peonies",
    "Foxgloves",
    "Dahlias",
    "Asters",
]
PLACES = ["by the lake", "in the walled garden", "along the rill", "under the cedar"]


def rows(n: int, *, prefix: str = "fb", start: int = 0, bump: int = 0) -> list[list[object]]:
    t0 = datetime(2025, 3, 3, 9, tzinfo=UTC)
    out: list[list[object]] = []
    for i in range(start, start + n):
        text = f"{PLANTS[i % 10]} {PLACES[i % 4]}, week {i // 10 + 1} ({prefix} {i})."
        out.append(
            [
                f"{prefix}-{i}",
                ACCOUNTS[i % 3],
                text,
                (t0 + timedelta(hours=6 * i)).isoformat(),
                500 + 10 * i + bump,
            ]
        )
    return out


def write_csv(path: Path, body: list[list[object]]) -> Path:
    with path.open("w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["post_id", "account", "text", "posted_at", "impressions"])
        w.writerows(body)
    return path


@pytest.fixture(scope="module")
def base_home(tmp_path_factory: pytest.TempPathFactory, embedder) -> Path:
    """30 posts over three accounts, plus: one text posted by two accounts
    (one shared vector) and one post id used by two accounts."""
    home = tmp_path_factory.mktemp("forget") / "home"
    ws = Workspace(settings=Settings(home=home), embedder=embedder)
    extra = [
        ["share-1", "loomhaven", SHARED, "2025-05-01T10:00:00+00:00", 900],
        ["share-2", "loomhaven_lab", SHARED, "2025-05-02T10:00:00+00:00", 300],
        ["dup-1", "loomhaven", "Dawn chorus walk, tickets now open.", "2025-05-03T07:00:00+00:00", 410],
        ["dup-1", "loomhaven_lab", "Soil science open lab on Thursday.", "2025-05-03T08:00:00+00:00", 120],
    ]
    ws.import_csv(write_csv(home.parent / "base.csv", rows(30) + extra), ImportOptions(new_accounts="UTC"))
    # A second reading of fb-4's metrics: it now has two snapshots.
    ws.import_csv(
        write_csv(home.parent / "update.csv", [rows(30, bump=50)[4]]), ImportOptions(new_accounts="UTC")
    )
    ws.close()
    return home


@pytest.fixture()
def ws(base_home: Path, tmp_path: Path, embedder) -> Iterator[Workspace]:
    shutil.copytree(base_home, tmp_path / "home")
    ws = Workspace(settings=Settings(home=tmp_path / "home", token=TOKEN), embedder=embedder)
    yield ws
    ws.close()


@pytest.fixture()
def client(ws: Workspace) -> Iterator[TestClient]:
    with TestClient(create_app(workspace=ws)) as c:
        yield c


def q(ws: Workspace, sql: str, *args: object) -> list[tuple]:
    """Straight SQL against the store's file, not through our code."""
    con = sqlite3.connect(ws.settings.db_url.removeprefix("sqlite:///"))
    try:
        return con.execute(sql, args).fetchall()
    finally:
        con.close()


def post_row(ws: Workspace, account: str, post_id: str) -> tuple[int, str, str]:
    (row,) = q(
        ws,
        "SELECT p.id, p.vector_key, p.text FROM posts p JOIN accounts a "
        "ON a.id = p.account_id WHERE a.handle = ? AND p.post_id = ?",
        account,
        post_id,
    )
    return row


def others(ws: Workspace, gone: set[tuple[str, str]]) -> pd.DataFrame:
    df = ws.store.posts_frame()
    keep = [(a, p) not in gone for a, p in zip(df["account"], df["post_id"], strict=True)]
    return df[keep].reset_index(drop=True)


def found_as_precedent(ws: Workspace, text: str) -> set[tuple[str, str]]:
    n = ws.store.counts()["posts"]
    return {(p.account, p.post_id) for p in ws.precedents(text, k=min(n, ws.settings.max_k))}


def test_forget_one_post_over_http(client: TestClient, ws: Workspace) -> None:
    pk, key, text = post_row(ws, "loomhaven", "fb-3")
    assert found_as_precedent(ws, text) >= {("loomhaven", "fb-3")}
    before, kept = ws.store.counts(), others(ws, {("loomhaven", "fb-3")})
    r = client.delete("/v1/posts/fb-3", params={"account": "loomhaven"}, headers=AUTH)
    assert r.status_code == 200, r.text
    assert r.json() == {"deleted": 1, "posts": before["posts"] - 1}
    assert q(ws, "SELECT COUNT(*) FROM posts WHERE id = ?", pk) == [(0,)]
    assert q(ws, "SELECT COUNT(*) FROM snapshots WHERE post_pk = ?", pk) == [(0,)]
    assert q(ws, "SELECT COUNT(*) FROM vectors WHERE key = ?", key) == [(0,)]
    assert ws.store.counts() == {
        **before,
        "posts": before["posts"] - 1,
        "snapshots": before["snapshots"] - 1,
        "vectors": before["vectors"] - 1,
    }
    assert ("loomhaven", "fb-3") not in found_as_precedent(ws, text)
    pd.testing.assert_frame_equal(others(ws, set()), kept)
    assert ws.index_state() == {"state": "ready", "count": before["posts"] - 1}


def test_forgetting_a_post_removes_all_its_snapshots(client: TestClient, ws: Workspace) -> None:
    pk, _, _ = post_row(ws, "loomhaven_events", "fb-4")
    assert q(ws, "SELECT COUNT(*) FROM snapshots WHERE post_pk = ?", pk) == [(2,)]
    before = ws.store.counts()
    r = client.delete("/v1/posts/fb-4", headers=AUTH)  # the id is unique: no account needed
    assert r.status_code == 200, r.text
    assert q(ws, "SELECT COUNT(*) FROM snapshots WHERE post_pk = ?", pk) == [(0,)]
    assert ws.store.counts()["snapshots"] == before["snapshots"] - 2


def test_a_shared_vector_stays_until_its_last_post_goes(client: TestClient, ws: Workspace) -> None:
    _, key, _ = post_row(ws, "loomhaven", "share-1")
    assert post_row(ws, "loomhaven_lab", "share-2")[1] == key
    r = client.delete("/v1/posts/share-1", params={"account": "loomhaven"}, headers=AUTH)
    assert r.status_code == 200
    assert q(ws, "SELECT COUNT(*) FROM vectors WHERE key = ?", key) == [(1,)]
    assert found_as_precedent(ws, SHARED) & {("loomhaven", "share-1"), ("loomhaven_lab", "share-2")} == {
        ("loomhaven_lab", "share-2")
    }
    r = client.delete("/v1/posts/share-2", params={"account": "loomhaven_lab"}, headers=AUTH)
    assert r.status_code == 200
    assert q(ws, "SELECT COUNT(*) FROM vectors WHERE key = ?", key) == [(0,)]
    assert not found_as_precedent(ws, SHARED) & {("loomhaven_lab", "share-2")}


def test_forget_an_account_over_http(client: TestClient, ws: Workspace) -> None:
    handle = "loomhaven_events"
    theirs = q(
        ws,
        "SELECT p.id, p.post_id, p.text, p.vector_key FROM posts p JOIN accounts a "
        "ON a.id = p.account_id WHERE a.handle = ?",
        handle,
    )
    assert len(theirs) == 10
    gone = {(handle, pid) for _, pid, _, _ in theirs}
    before, kept = ws.store.counts(), others(ws, gone)
    r = client.delete(f"/v1/accounts/{handle}", headers=AUTH)
    assert r.status_code == 200, r.text
    assert r.json() == {"deleted": 10, "posts": before["posts"] - 10}
    assert handle not in {a["handle"] for a in client.get("/v1/accounts").json()}
    pks = ",".join(str(pk) for pk, *_ in theirs)
    assert q(ws, f"SELECT COUNT(*) FROM snapshots WHERE post_pk IN ({pks})") == [(0,)]
    keys = tuple(k for *_, k in theirs)
    marks = ",".join("?" * len(keys))
    assert q(ws, f"SELECT COUNT(*) FROM vectors WHERE key IN ({marks})", *keys) == [(0,)]
    assert ws.store.counts()["posts"] == before["posts"] - 10
    for _, _, text, _ in theirs:
        assert not found_as_precedent(ws, text) & gone
    pd.testing.assert_frame_equal(others(ws, set()), kept)
    r = client.delete(f"/v1/accounts/{handle}", headers=AUTH)
    assert r.status_code == 404 and r.json()["error"]["code"] == "not_found"


def test_ambiguous_and_unknown_posts_change_nothing(client: TestClient, ws: Workspace) -> None:
    before = ws.store.counts()
    r = client.delete("/v1/posts/dup-1", headers=AUTH)
    assert r.status_code == 422
    assert r.json()["error"]["field"] == "account"
    assert client.delete("/v1/posts/no-such-post", headers=AUTH).status_code == 404
    r = client.delete("/v1/posts/dup-1", params={"account": "nobody"}, headers=AUTH)
    assert r.status_code == 404
    assert ws.store.counts() == before
    r = client.delete("/v1/posts/dup-1", params={"account": "loomhaven_lab"}, headers=AUTH)
    assert r.status_code == 200
    assert q(
        ws, "SELECT a.handle FROM posts p JOIN accounts a ON a.id = p.account_id WHERE p.post_id = 'dup-1'"
    ) == [("loomhaven",)]


def test_forget_command_asks_first(ws: Workspace, embedder) -> None:
    use_embedder(embedder)
    runner = CliRunner()
    env = {"SOUNDING_HOME": str(ws.settings.resolved_home)}
    before = ws.store.counts()["posts"]
    r = runner.invoke(cli_app, ["forget", "--post", "fb-0", "--account", "loomhaven"], input="n\n", env=env)
    assert r.exit_code == 1 and "Forget post fb-0 of account loomhaven?" in r.output
    assert ws.store.counts()["posts"] == before
    r = runner.invoke(cli_app, ["forget", "--post", "fb-0", "--account", "loomhaven"], input="y\n", env=env)
    assert r.exit_code == 0, r.output
    assert "forgot 1 posts" in r.output
    assert ws.store.counts()["posts"] == before - 1
    r = runner.invoke(cli_app, ["forget", "--account", "loomhaven_events", "--yes"], env=env)
    assert r.exit_code == 0, r.output
    assert ws.store.counts()["posts"] == before - 11
    assert "loomhaven_events" not in {a.handle for a in ws.store.accounts()}
    r = runner.invoke(cli_app, ["forget", "--account", "nobody", "--yes"], env=env)
    assert r.exit_code == 1 and "unknown account 'nobody'" in r.output
    r = runner.invoke(cli_app, ["forget"], env=env)
    assert r.exit_code == 1 and "say what to forget" in r.output
    # The command went through Workspace.forget: the index on disk is in step.
    assert ws.index_state() == {"state": "ready", "count": before - 11}


# Backups -----------------------------------------------------------------


def check_complete(db: Path) -> tuple[int, list[str]]:
    """Integrity, and every post with a snapshot and its vector; returns
    the post count and the post ids in row order."""
    con = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
    try:

        def count(sql: str) -> object:
            return con.execute(sql).fetchone()[0]

        assert count("PRAGMA integrity_check") == "ok"
        assert (
            count(
                "SELECT COUNT(*) FROM posts p WHERE NOT EXISTS "
                "(SELECT 1 FROM snapshots s WHERE s.post_pk = p.id)"
            )
            == 0
        )
        assert (
            count(
                "SELECT COUNT(*) FROM posts p WHERE NOT EXISTS "
                "(SELECT 1 FROM vectors v WHERE v.key = p.vector_key)"
            )
            == 0
        )
        assert count("SELECT COUNT(*) FROM vectors WHERE key NOT IN (SELECT vector_key FROM posts)") == 0
        ids = [r[0] for r in con.execute("SELECT post_id FROM posts ORDER BY id")]
    finally:
        con.close()
    return len(ids), ids


def test_backup_while_importing_is_consistent_and_restores(base_home: Path, tmp_path: Path, embedder) -> None:
    shutil.copytree(base_home, tmp_path / "home")
    ws = Workspace(settings=Settings(home=tmp_path / "home", import_batch_rows=20), embedder=embedder)
    counts_seen = [ws.store.counts()["posts"]]  # every count the source has had
    paused, resume = threading.Event(), threading.Event()
    failure: list[BaseException] = []

    def progress(_done: int, _total: int) -> None:
        counts_seen.append(ws.store.counts()["posts"])  # after each committed batch
        if len(counts_seen) == 3:
            paused.set()
            resume.wait(30)

    def writer() -> None:
        try:
            ws.import_csv(
                write_csv(tmp_path / "more.csv", rows(200, prefix="more", start=100)),
                ImportOptions(new_accounts="UTC"),
                progress=progress,
            )
        except BaseException as exc:  # reported below
            failure.append(exc)

    th = threading.Thread(target=writer)
    th.start()
    assert paused.wait(120), "the import never committed a batch"
    resume.set()  # the writer goes on while the copy is taken
    dest = ws.store.backup(tmp_path / "copies")
    th.join(300)
    assert not th.is_alive() and not failure, failure
    final = ws.store.counts()["posts"]
    source_ids = [r[0] for r in q(ws, "SELECT post_id FROM posts ORDER BY id")]
    ws.close()

    n, ids = check_complete(dest)
    assert n in counts_seen, (n, counts_seen)  # a state the source really had
    assert n < final, "the backup was not taken while the import was running"
    assert ids == source_ids[:n]  # the same posts, up to that point

    copy = Workspace(
        settings=Settings(home=tmp_path / "as-copy", database_url=f"sqlite:///{dest}"), embedder=embedder
    )
    assert copy.store.counts()["posts"] == n
    copy.close()

    restored = tmp_path / "restored"
    restored.mkdir()
    shutil.copy(dest, restored / "sounding.db")
    rws = Workspace(settings=Settings(home=restored), embedder=embedder)
    try:
        assert rws.index_state()["state"] == "missing"
        text = post_row(rws, "loomhaven_lab", "fb-2")[2]
        top = rws.precedents(text, k=1)[0]
        assert (top.account, top.post_id) == ("loomhaven_lab", "fb-2")
        assert top.similarity > 0.999  # the same text: cosine 1 up to float32 rounding
        assert rws.index_state() == {"state": "ready", "count": n}
    finally:
        rws.close()


def test_backup_command(ws: Workspace, tmp_path: Path, embedder) -> None:
    use_embedder(embedder)
    runner = CliRunner()
    env = {"SOUNDING_HOME": str(ws.settings.resolved_home)}
    dest = tmp_path / "team-backup.db"
    r = runner.invoke(cli_app, ["backup", str(dest)], env=env)
    assert r.exit_code == 0, r.output
    n = ws.store.counts()["posts"]
    assert f"backed up {n} posts" in r.output and "integrity check ok" in r.output
    assert check_complete(dest)[0] == n
    r = runner.invoke(cli_app, ["backup", str(dest)], env=env)
    assert r.exit_code == 1 and "already exists" in r.output
