"""Forgotten means forgotten: after a forget, neither the post's id nor its
text (nor a forgotten account's handle) is in any answer, any table of the
store, or any file of the data directory.

The track record is where copies hid: a recorded forecast keeps its top
precedents (id, account, text) and, once published, the draft's own text.
The scenario is the demo's plan file forecast, then published and scored
(as tests/test_track_record_demo.py does), so the track record's worst misses
show precedents. Tables are read with Python's sqlite3, not through our code;
files are searched byte for byte, which also covers free pages of the SQLite
file and its write-ahead log (SQLite's ``secure_delete`` overwrites deleted
content, sqlite.org/pragma.html#pragma_secure_delete).
"""

from __future__ import annotations

import json
import os
import signal
import sqlite3
import subprocess
import sys
from pathlib import Path
from typing import Any

import pytest
from conftest import AUTH, TOKEN
from fastapi.testclient import TestClient
from sqlalchemy import delete
from typer.testing import CliRunner

from models.embedding import Embedder
from service.api.app import create_app
from service.cli import app
from service.cli.base import use_embedder
from service.settings import Settings
from service.storage.forget_log import read as read_log
from service.storage.tables import ForecastGiven
from service.storage.uploads import new_upload, release
from service.workspace import Workspace

ROOT = Path(__file__).resolve().parents[2]
PLAN = ROOT / "demo_data" / "plan.csv"
PUBLISHED = ROOT / "demo_data" / "plan_published.csv"
runner = CliRunner()


def run(*args: str) -> str:
    res = runner.invoke(app, list(args))
    assert res.exit_code == 0, res.output
    return res.output


def accounts_named(node: Any) -> set[str]:
    """Every value of an "account" field anywhere in a JSON answer."""
    found: set[str] = set()
    if isinstance(node, dict):
        for k, v in node.items():
            if k in ("account", "handle") and isinstance(v, str):
                found.add(v)
            found |= accounts_named(v)
    elif isinstance(node, list):
        for v in node:
            found |= accounts_named(v)
    return found


def post_ids_named(node: Any) -> set[tuple[str, str]]:
    """Every (account, post_id) pair anywhere in a JSON answer."""
    found: set[tuple[str, str]] = set()
    if isinstance(node, dict):
        if isinstance(node.get("post_id"), str):
            found.add((str(node.get("account")), node["post_id"]))
        for v in node.values():
            found |= post_ids_named(v)
    elif isinstance(node, list):
        for v in node:
            found |= post_ids_named(v)
    return found


def table_values(db: Path) -> list[tuple[str, str, object]]:
    """(table, column, value) of every text value of every table, by plain SQL."""
    con = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
    try:
        tables = [r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type = 'table'")]
        out = []
        for t in tables:
            cur = con.execute(f'SELECT * FROM "{t}"')
            cols = [d[0] for d in cur.description]
            for row in cur:
                out += [(t, c, v) for c, v in zip(cols, row, strict=True) if isinstance(v, str)]
        return out
    finally:
        con.close()


def bytes_under(home: Path) -> dict[Path, bytes]:
    return {p: p.read_bytes() for p in home.rglob("*") if p.is_file()}


@pytest.fixture()
def scored_home(
    demo_copy: Workspace, embedder: Embedder, monkeypatch: pytest.MonkeyPatch, tmp_path: Path
) -> Path:
    use_embedder(embedder)
    with demo_copy.store.session() as s:
        s.execute(delete(ForecastGiven))
    home = demo_copy.settings.resolved_home
    monkeypatch.setenv("SOUNDING_HOME", str(home))
    monkeypatch.setenv("SOUNDING_NOW", "2026-12-01T09:00:00Z")
    run("check", "--plan", str(PLAN), "--out", str(tmp_path / "forecasts.csv"))
    monkeypatch.setenv("SOUNDING_NOW", "2027-01-15T00:00:00Z")  # every published post settled
    run("import", str(PUBLISHED))
    return home


def test_forgotten_posts_and_account_are_nowhere(scored_home: Path, embedder: Embedder) -> None:
    ws = Workspace(settings=Settings(home=scored_home, token=TOKEN), embedder=embedder)
    db = scored_home / "sounding.db"
    try:
        with TestClient(create_app(workspace=ws)) as client:
            rep = client.get("/v1/track-record").json()
            worst = rep["worst"]
            assert len(worst) >= 3 and all(w["precedents"] for w in worst)
            # P: a history post shown as a precedent of another account's forecast.
            p = next(pr for w in worst for pr in w["precedents"] if pr["account"] != w["account"])
            p_text = (
                ws.store.posts_frame()
                .set_index(["account", "post_id"])
                .loc[(p["account"], p["post_id"]), "text"]
            )
            # Q: a published post that fulfilled a forecast (the forecast's text is its text).
            q = next(w for w in worst if w["post_id"] and w["account"] != p["account"])
            q_text = q["text"]
            # H: an account whose posts are precedents of other accounts' forecasts.
            h = next(
                pr["account"]
                for w in worst
                for pr in w["precedents"]
                if pr["account"] not in (w["account"], p["account"], q["account"])
            )
            gone = {(p["account"], p["post_id"]), (q["account"], q["post_id"])}
            # The checks below can fail: before the forget, every copy is there.
            assert gone <= post_ids_named(rep) and h in accounts_named(rep)
            assert p_text[:280] in json.dumps(rep, ensure_ascii=False)
            near = client.post("/v1/precedents", json={"text": p_text[: len(p_text) // 2], "k": 50}).json()
            assert (p["account"], p["post_id"]) in post_ids_named(near)
            files = b"".join(bytes_under(scored_home).values())
            assert p_text[:60].encode() in files and q_text[:60].encode() in files

            r = client.delete(f"/v1/posts/{p['post_id']}", params={"account": p["account"]}, headers=AUTH)
            assert r.status_code == 200 and r.json()["deleted"] == 1, r.text
            run("forget", "--post", q["post_id"], "--account", q["account"], "--yes")
            r = client.delete(f"/v1/accounts/{h}", headers=AUTH)
            assert r.status_code == 200 and r.json()["deleted"] > 0, r.text

            answers = {
                "track-record": client.get("/v1/track-record").json(),
                "track-record (cli)": json.loads(run("track-record", "--json")),
                "accounts": client.get("/v1/accounts").json(),
                "health": client.get("/v1/health").json(),
                "segments": client.post("/v1/segments", json={"by": "link"}).json(),
            }
            for text in (p_text, q_text):
                half = text[: len(text) // 2]
                answers[f"precedents {half[:20]}"] = client.post(
                    "/v1/precedents", json={"text": half, "k": 50}
                ).json()
                answers[f"forecast {half[:20]}"] = client.post(
                    "/v1/forecasts",
                    json={
                        "text": half,
                        "account": "loomhaven",
                        "planned_at": "2027-01-20T12:00:00Z",
                        "record": False,
                    },
                ).json()
            for name, answer in answers.items():
                written = json.dumps(answer, ensure_ascii=False)
                assert not post_ids_named(answer) & gone, name
                assert h not in accounts_named(answer), name
                assert p_text not in written and q_text not in written, name
            assert answers["track-record"]["overall"]["given"] > 0  # the rest is still there
    finally:
        ws.close()

    for table, column, value in table_values(db):
        assert p_text not in value and q_text not in value, (table, column)
        assert value not in (p["post_id"], q["post_id"]), (table, column)
        assert not (table == "accounts" and value == h), column
        if value.startswith("["):  # the precedents kept with a forecast
            for e in json.loads(value):
                assert (e["account"], e["post_id"]) not in gone and e["account"] != h, table
    for path, data in bytes_under(scored_home).items():
        for text in (p_text, q_text):
            assert text[:60].encode() not in data, path
    # The forget log, kept apart from the store, holds ids and handles only.
    logged = {(e.account, e.post_id) for e in read_log(scored_home)}
    assert logged == gone | {(h, None)}
    raw = (scored_home / "forgotten.jsonl").read_text(encoding="utf-8")
    assert p_text[:30] not in raw and q_text[:30] not in raw


def test_an_upload_left_by_a_killed_import_is_cleared_and_a_live_one_kept(make_workspace) -> None:
    ws = make_workspace()
    uploads = ws.settings.uploads_dir
    uploads.mkdir(parents=True, exist_ok=True)
    # A process that receives an upload and is killed with SIGKILL before its
    # import ends: the file with the posts' texts stays, its lock goes with it.
    child = (
        "import os, signal, sys; from pathlib import Path; from service.storage.uploads import new_upload; "
        "p, fd, held = new_upload(Path(sys.argv[1])); "
        "os.write(fd, b'post_id,account,text\\nx-1,loomhaven,A walk under the cedar at dawn\\n'); "
        "os.kill(os.getpid(), signal.SIGKILL)"
    )
    proc = subprocess.run([sys.executable, "-c", child, str(uploads)], cwd=ROOT, check=False)
    assert proc.returncode == -signal.SIGKILL
    (stale,) = uploads.glob("upload-*.csv")
    assert b"under the cedar" in stale.read_bytes()
    live, fd, held = new_upload(uploads)  # an upload in flight in this process
    try:
        ws.close()
        make_workspace()  # the start of a service over the same directory
        assert not stale.exists() and live.exists()
    finally:
        os.close(fd)
        release(live, held)
    assert not live.exists()
