"""Restoring a backup: after a writer was killed with SIGKILL (its -wal and
-shm files left behind), the restored store is exactly the backup, not the
backup with the old write-ahead log replayed onto it; posts forgotten since
the backup come back and are listed, and forgotten again when asked.

References: SQLite's "Write-Ahead Logging" (sqlite.org/wal.html): a
``-wal`` file beside a database is applied to it when it is next opened,
which is why the stale one must go; ``PRAGMA integrity_check`` answers
"ok" for an intact file (sqlite.org/pragma.html#pragma_integrity_check).
"""

from __future__ import annotations

import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest
from conftest import history_csv
from typer.testing import CliRunner

from models.errors import Busy, InputError, StoreError
from service.cli import app
from service.cli.base import use_embedder
from service.ingest.options import ImportOptions
from service.restore import restore
from service.settings import Settings
from service.workspace import Workspace

ROOT = Path(__file__).resolve().parents[2]

# A writing process: one committed transaction after another, until killed.
WRITER = """
import sys
from service.storage.store import Store
store = Store(url=sys.argv[1])
i = 0
while True:
    store.set_account(f"writer-{i}", display_name="written after the backup")
    i += 1
"""


def post_ids(db: Path) -> list[tuple[str, str]]:
    con = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
    try:
        assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        return con.execute(
            "SELECT a.handle, p.post_id FROM posts p JOIN accounts a ON a.id = p.account_id ORDER BY p.id"
        ).fetchall()
    finally:
        con.close()


def handles(db: Path) -> set[str]:
    con = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
    try:
        return {r[0] for r in con.execute("SELECT handle FROM accounts")}
    finally:
        con.close()


@pytest.fixture()
def prepared(tmp_path: Path, embedder) -> tuple[Settings, Path, str]:
    """A store of 40 posts backed up, then one post forgotten and a writer
    killed mid-stream: (settings, backup file, text of the forgotten post)."""
    settings = Settings(home=tmp_path / "home")
    ws = Workspace(settings=settings, embedder=embedder)
    csv = tmp_path / "h.csv"
    csv.write_bytes(history_csv(40, accounts=("loomhaven", "loomhaven_lab")))
    ws.import_csv(csv, ImportOptions(new_accounts="UTC"))
    backup = ws.store.backup(tmp_path / "backups" / "b.db")
    text = ws.store.posts_frame().set_index("post_id").loc["h-3", "text"]
    ws.forget(post_id="h-3")
    ws.close()

    db = settings.resolved_home / "sounding.db"
    env = {k: v for k, v in os.environ.items() if not k.startswith("SOUNDING_")}
    proc = subprocess.Popen([sys.executable, "-c", WRITER, settings.db_url], cwd=ROOT, env=env)
    try:
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and len(handles(db) - {"loomhaven", "loomhaven_lab"}) < 20:
            time.sleep(0.05)
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(30)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == -signal.SIGKILL
    wal = db.with_name("sounding.db-wal")
    assert wal.is_file() and wal.stat().st_size > 0  # what a plain file copy would have replayed
    return settings, backup, text


def test_restore_after_a_killed_writer_is_the_backup_and_forgets_again(prepared, embedder) -> None:
    settings, backup, text = prepared
    db = settings.resolved_home / "sounding.db"
    expected = post_ids(backup)
    assert ("loomhaven_lab", "h-3") in expected and ("loomhaven_lab", "h-3") not in post_ids(db)

    done = restore(backup, settings, forget_again=False, embedder=embedder)
    assert [(e.account, e.post_id) for e in done.back] == [("loomhaven_lab", "h-3")]
    assert done.posts == 40 and done.forgotten_again == 0
    # Exactly the backup: its posts in order, and none of the killed writer's accounts.
    assert post_ids(db) == expected
    assert handles(db) == {"loomhaven", "loomhaven_lab"}
    ws = Workspace(settings=settings, embedder=embedder)
    try:
        assert ws.index_state() == {"state": "ready", "count": 40}  # rebuilt by the restore
        top = ws.precedents(text, k=1)[0]
        assert (top.account, top.post_id) == ("loomhaven_lab", "h-3")
        assert top.similarity > 0.999  # its own text: cosine 1 up to float32 rounding
        # A restore refuses while anything has the directory open, and changes nothing.
        with pytest.raises(Busy, match=r"has .* open"):
            restore(backup, settings, forget_again=True, embedder=embedder)
        assert post_ids(db) == expected
    finally:
        ws.close()

    done = restore(backup, settings, forget_again=True, embedder=embedder)
    assert done.forgotten_again == 1 and done.posts == 39
    assert ("loomhaven_lab", "h-3") not in post_ids(db)
    assert len(post_ids(db)) == 39


def test_a_damaged_backup_is_refused_and_the_store_kept(prepared, tmp_path: Path, embedder) -> None:
    settings, backup, _ = prepared
    db = settings.resolved_home / "sounding.db"
    ws = Workspace(settings=settings, embedder=embedder)
    before = post_ids(db)
    ws.close()
    damaged = tmp_path / "damaged.db"
    data = bytearray(backup.read_bytes())
    page = 4096
    assert len(data) > 4 * page
    data[2 * page : 3 * page] = os.urandom(page)  # a whole page in the middle
    damaged.write_bytes(bytes(data))
    with pytest.raises((StoreError, InputError)):
        restore(damaged, settings, forget_again=False, embedder=embedder)
    assert post_ids(db) == before
    with pytest.raises(InputError, match="no backup file"):
        restore(tmp_path / "nothing.db", settings, forget_again=False, embedder=embedder)


def test_restore_command(prepared, embedder, monkeypatch: pytest.MonkeyPatch) -> None:
    settings, backup, _ = prepared
    use_embedder(embedder)
    monkeypatch.setenv("SOUNDING_HOME", str(settings.resolved_home))
    runner = CliRunner()
    # Not at a terminal and not told what to do with the forgotten post: nothing changes.
    r = runner.invoke(app, ["restore", str(backup)])
    assert r.exit_code == 1 and "post h-3 of account loomhaven_lab" in r.output
    assert "--forget-again" in r.output
    assert "writer-0" in handles(settings.resolved_home / "sounding.db")
    r = runner.invoke(app, ["restore", str(backup), "--forget-again"])
    assert r.exit_code == 0, r.output
    assert "restored 39 posts" in r.output and "forgot again 1" in r.output
    r = runner.invoke(app, ["backup", str(backup.with_name("again.db"))])
    assert r.exit_code == 0 and f"sounding restore {backup.with_name('again.db')}" in r.output
