"""Crash safety: an import killed with SIGKILL part-way leaves whole batches
only, the index is found stale and rebuilt, and a re-run completes the
import without duplicating anything.

SQLite's guarantee is the reference: with the WAL journal a transaction
that has not committed is rolled back when the database is next opened,
whatever killed the writer (sqlite.org, "Write-Ahead Logging" and "Atomic
Commit In SQLite"). Each import batch is one transaction, so a batch is
either all there (posts, snapshots, vectors) or not at all.
"""

from __future__ import annotations

import csv
import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np

from service.ingest.options import ImportOptions
from service.settings import Settings
from service.workspace import Workspace

ROWS = 6000
BATCH = 200
KILL_AFTER = 3 * BATCH  # posts committed before the kill
ROOT = Path(__file__).resolve().parents[2]

# 300 distinct short texts, reused over 6,000 rows: after the first two
# batches nothing new needs embedding, so a batch is mostly its write
# transaction and the kill is likely to land inside one.
SUBJECTS = [
    "Magnolias",
    "Snowdrops",
    "The bee hotel",
    "Seed library",
    "Fern house",
    "Rose arbour",
    "Herb garden",
    "Lake path",
    "Orchard",
    "Glasshouse",
]
NEWS = [
    "opens early",
    "needs volunteers",
    "is in full colour",
    "gets a new bench",
    "hosts a sketching morning",
    "is closed for repairs",
]
WHEN = ["this Saturday", "from Monday", "after the rain", "at dawn", "all week"]
TEXTS = [f"{s} {n} {w}." for s in SUBJECTS for n in NEWS for w in WHEN]


def write_big_csv(path: Path) -> list[str]:
    start = datetime(2024, 1, 1, 8, tzinfo=UTC)
    ids = []
    with path.open("w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["post_id", "account", "text", "posted_at", "impressions", "likes"])
        for i in range(ROWS):
            pid = f"big-{i:05d}"
            ids.append(pid)
            w.writerow(
                [
                    pid,
                    ("loomhaven", "loomhaven_events", "loomhaven_lab")[i % 3],
                    TEXTS[i % len(TEXTS)],
                    (start + timedelta(minutes=97 * i)).isoformat(),
                    150 + (i * 37) % 2000,
                    (i * 13) % 90,
                ]
            )
    return ids


def count_posts(db: Path) -> int:
    """Committed posts, read-only, as another process sees them."""
    try:
        con = sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=1)
        try:
            return con.execute("SELECT COUNT(*) FROM posts").fetchone()[0]
        finally:
            con.close()
    except sqlite3.Error:
        return 0  # not created yet


def one(con: sqlite3.Connection, sql: str) -> int:
    return con.execute(sql).fetchone()[0]


def test_killed_import_leaves_whole_batches_and_a_rerun_completes_it(
    tmp_path: Path, embedder, artifacts: Path, capsys
) -> None:
    big = tmp_path / "big.csv"
    ids = write_big_csv(big)
    home = tmp_path / "home"
    db = home / "sounding.db"
    env = {k: v for k, v in os.environ.items() if not k.startswith("SOUNDING_")}
    env.update(SOUNDING_HOME=str(home), SOUNDING_IMPORT_BATCH_ROWS=str(BATCH), HF_HUB_OFFLINE="1")
    log = (tmp_path / "import.out").open("wb")
    proc = subprocess.Popen(
        [
            sys.executable,
            "-c",
            "from service.cli import main; main()",
            "import",
            str(big),
            "--json",
            "--new-account",
            "--timezone",
            "UTC",
        ],
        cwd=ROOT,
        env=env,
        stdout=log,
        stderr=subprocess.STDOUT,
    )
    try:
        deadline = time.monotonic() + 240  # the subprocess loads the model itself
        seen = 0
        while time.monotonic() < deadline and proc.poll() is None:
            seen = count_posts(db)
            if seen >= KILL_AFTER:
                os.kill(proc.pid, signal.SIGKILL)
                break
            time.sleep(0.02)
        proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        log.close()
    output = (tmp_path / "import.out").read_text(errors="replace")
    assert proc.returncode == -signal.SIGKILL, f"the import was not killed part-way:\n{output}"

    con = sqlite3.connect(str(db))  # opening rolls back whatever was in flight
    try:
        assert one(con, "PRAGMA integrity_check") == "ok"
        committed = one(con, "SELECT COUNT(*) FROM posts")
        assert KILL_AFTER <= committed < ROWS
        assert committed % BATCH == 0, f"{committed} posts: a batch was cut in half"
        # The committed posts are the file's first rows, batch by batch.
        stored = [r[0] for r in con.execute("SELECT post_id FROM posts ORDER BY id")]
        assert stored == ids[:committed]
        assert one(con, "SELECT COUNT(*) FROM snapshots") == committed
        assert (
            one(
                con,
                """SELECT COUNT(*) FROM posts p WHERE
                           (SELECT COUNT(*) FROM snapshots s WHERE s.post_pk = p.id) != 1""",
            )
            == 0
        )
        assert (
            one(
                con,
                """SELECT COUNT(*) FROM posts p
                           LEFT JOIN vectors v ON v.key = p.vector_key WHERE v.key IS NULL""",
            )
            == 0
        )
        assert (
            one(
                con,
                """SELECT COUNT(*) FROM vectors
                           WHERE key NOT IN (SELECT vector_key FROM posts)""",
            )
            == 0
        )
        # The vectors the killed process wrote are the model's vectors of the texts.
        sample = con.execute(
            "SELECT p.text, v.data FROM posts p JOIN vectors v ON v.key = p.vector_key ORDER BY p.id LIMIT 5"
        ).fetchall()
    finally:
        con.close()
    theirs = np.vstack([np.frombuffer(d, dtype=np.float32) for _, d in sample])
    ours = embedder.encode([t for t, _ in sample])
    assert np.allclose(theirs, ours, atol=1e-4)

    ws = Workspace(settings=Settings(home=home, import_batch_rows=BATCH), embedder=embedder)
    try:
        # The killed process saved an index of the empty store at its start.
        assert ws.index_state()["state"] != "ready"
        index = ws.index()  # found stale: rebuilt from the store
        assert ws.index_state() == {"state": "ready", "count": committed}
        assert index.ntotal == committed
        top = ws.precedents(TEXTS[7], k=1)[0]
        assert top.text == TEXTS[7] and top.similarity > 0.999

        summary = ws.import_csv(big, ImportOptions(new_accounts="UTC"))  # the re-run
        assert (summary.added, summary.unchanged, summary.updated, summary.rejected) == (
            ROWS - committed,
            committed,
            0,
            0,
        )
        assert ws.store.counts() == {"accounts": 3, "posts": ROWS, "snapshots": ROWS, "vectors": len(TEXTS)}
        assert ws.index_state() == {"state": "ready", "count": ROWS}
    finally:
        ws.close()
    figures = {
        "rows": ROWS,
        "batch_rows": BATCH,
        "committed_at_kill": committed,
        "whole_batches": committed // BATCH,
        "rerun_added": ROWS - committed,
        "rerun_unchanged": committed,
    }
    (artifacts / "crash.json").write_text(json.dumps(figures, indent=2))
    with capsys.disabled():
        print(
            f"\ncrash: SIGKILL after {committed} of {ROWS} rows committed "
            f"({committed // BATCH} whole batches of {BATCH}, no partial batch); index found "
            f"stale and rebuilt; re-run added {ROWS - committed}, unchanged {committed}"
        )
