"""nothing lost, nothing stale, nothing that takes the service down.

Damaged model files, concurrent writers, a full disk, read-only data
directories, backups, and the local service's defences (Host check, body cap,
slow connections, short tokens, paths in errors, offline /docs). Each test
first sets up the situation the issue reported as broken.
"""

from __future__ import annotations

import csv
import json
import os
import shutil
import socket
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path

import filelock
import httpx
import numpy as np
import pytest
import uvicorn
from fastapi.testclient import TestClient
from support.serving import serve  # the shared loopback server
from typer.testing import CliRunner

from models.artefact import versions
from models.errors import Busy, InputError, NotReady, ReadOnly, StoreError
from service.api import guard
from service.api.app import create_app
from service.cli import app as cli_app
from service.cli.base import use_embedder
from service.cli.history import check_bind
from service.forecast import training as forecasting
from service.forecast.draft import Draft
from service.ingest.importer import import_csv
from service.ingest.options import ImportOptions
from service.settings import Settings
from service.storage.locking import LOCK_FILE
from service.workspace import Workspace

ROOT = Path(__file__).resolve().parents[1]
TOKEN = "reliability-token-0123456789abcdef"  # 34 characters
AUTH = {"Authorization": f"Bearer {TOKEN}"}
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
    "Ferns",
    "Irises",
    "Lilies",
]
PLACES = [
    "by the lake",
    "in the walled garden",
    "along the rill",
    "under the cedar",
    "in the glasshouse",
    "on the rock bank",
    "near the east gate",
]
VERBS = [
    "are opening",
    "need a rest",
    "were planted today",
    "look their best",
    "drew a crowd",
    "are being divided",
    "survived the frost",
]


def rows(
    n: int, *, prefix: str, accounts: tuple[str, ...] = ("garden", "lab"), start: int = 0
) -> list[list[object]]:
    """Invented posts with distinct texts, dated in 2025 (mature), with impressions."""
    rng = np.random.default_rng(start + len(prefix))
    t0 = datetime(2025, 1, 6, 8, tzinfo=UTC)
    out: list[list[object]] = []
    for i in range(start, start + n):
        text = f"{PLANTS[i % 13]} {PLACES[i % 7]} {VERBS[(i // 7) % 7]}, note {i} of the {prefix} series."
        out.append(
            [
                f"{prefix}-{i}",
                accounts[i % len(accounts)],
                text,
                (t0 + timedelta(hours=7 * i)).isoformat(),
                int(rng.integers(200, 5000)),
            ]
        )
    return out


def write_csv(path: Path, body: list[list[object]]) -> Path:
    with path.open("w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["post_id", "account", "text", "posted_at", "impressions"])
        w.writerows(body)
    return path


def index_matches_store(ws: Workspace) -> bool:
    stored = sorted(p for p, _ in ws.store.index_pairs())
    return sorted(ws.index().ids().tolist()) == stored


@pytest.fixture(scope="module")
def trained_home(tmp_path_factory: pytest.TempPathFactory, embedder) -> Path:
    """300 posts of two accounts and one trained impressions model."""
    home = tmp_path_factory.mktemp("reliability") / "home"
    ws = Workspace(settings=Settings(home=home), embedder=embedder)
    ws.store.set_account("garden", timezone="Europe/London")
    ws.import_csv(
        write_csv(home.parent / "base.csv", rows(300, prefix="base")), ImportOptions(new_accounts="UTC")
    )
    forecasting.train(ws, "impressions", backtest=False)
    ws.close()
    return home


@pytest.fixture()
def copy_home(trained_home: Path, tmp_path: Path) -> Path:
    home = tmp_path / "copy"
    shutil.copytree(trained_home, home)
    return home


def open_ws(home: Path, embedder, **kw: object) -> Workspace:
    return Workspace(settings=Settings(home=home, token=TOKEN, **kw), embedder=embedder)


def second_version(home: Path) -> tuple[str, str]:
    """Copy the trained version as a newer one (same files, same checksums)."""
    base = home / "forecasters" / "impressions"
    old = versions(home / "forecasters", "impressions")[-1]
    new = "29991231T000000000Z"
    shutil.copytree(base / old, base / new)
    cfg = json.loads((base / new / "config.json").read_text())
    cfg["version"] = new
    (base / new / "config.json").write_text(json.dumps(cfg))
    return old, new


# 15.2 Damaged artefacts ------------------------------------------------------


def test_truncated_booster_is_skipped_and_named_by_health(copy_home: Path, embedder) -> None:
    old, new = second_version(copy_home)
    booster = copy_home / "forecasters" / "impressions" / new / "quantiles" / "boosted" / "median.txt"
    data = booster.read_bytes()
    booster.write_bytes(data[: len(data) // 2])  # the repro: cut to half its size
    ws = open_ws(copy_home, embedder)
    try:
        # Before the fix LightGBM aborted this very process (exit 134) here.
        f = ws.forecaster.forecast([Draft(text="Tulips by the lake are opening", account="garden")])[0]
        assert f.model_version == old
        with TestClient(create_app(workspace=ws)) as c:
            health = c.get("/v1/health").json()
        assert health["forecaster"] == old
        assert len(health["damaged_models"]) == 1 and new in health["damaged_models"][0]
        assert "median.txt" in health["damaged_models"][0]
    finally:
        ws.close()


def test_truncated_booster_does_not_kill_the_cli(copy_home: Path) -> None:
    """A real process, since an abort cannot be caught in-process."""
    _, new = second_version(copy_home)
    booster = copy_home / "forecasters" / "impressions" / new / "quantiles" / "boosted" / "upper_0.txt"
    booster.write_bytes(booster.read_bytes()[:1000])
    env = {**os.environ, "SOUNDING_HOME": str(copy_home), "PYTHONPATH": str(ROOT)}
    r = subprocess.run(
        [
            sys.executable,
            "-c",
            "from service.cli import main; main()",
            "check",
            "Ferns in the glasshouse look their best",
            "--account",
            "garden",
        ],
        env=env,
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert r.returncode == 0, (r.returncode, r.stderr[-2000:])
    assert f"model version {new} is damaged" in r.stderr


def test_models_saved_before_checksums_still_load_unless_cut(copy_home: Path, embedder) -> None:
    """A version of format 1 (no checksums, saved by earlier releases) is
    still served; a cut booster in it is caught without LightGBM."""
    version = versions(copy_home / "forecasters", "impressions")[-1]
    d = copy_home / "forecasters" / "impressions" / version
    cfg = json.loads((d / "config.json").read_text())
    cfg["format"] = 1
    del cfg["files"]
    (d / "config.json").write_text(json.dumps(cfg))
    ws = open_ws(copy_home, embedder)
    try:
        draft = [Draft(text="Lilies in the glasshouse", account="garden")]
        assert ws.forecaster.forecast(draft)[0].model_version == version
        booster = d / "quantiles" / "boosted" / "lower_2.txt"
        booster.write_bytes(booster.read_bytes()[:-200])  # only the end missing
        with pytest.raises(NotReady, match=r"lower_2\.txt is cut short"):
            ws.forecaster.forecast(draft, metric="impressions")
    finally:
        ws.close()


def test_garbage_config_is_skipped_and_all_damaged_is_a_clean_409(copy_home: Path, embedder) -> None:
    old, new = second_version(copy_home)
    (copy_home / "forecasters" / "impressions" / new / "config.json").write_text("{not json")
    ws = open_ws(copy_home, embedder)
    try:
        with TestClient(create_app(workspace=ws)) as c:
            body = {"text": "Irises near the east gate", "account": "garden"}
            r = c.post("/v1/forecasts", json=body)
            assert r.status_code == 200 and r.json()["model_version"] == old
            (copy_home / "forecasters" / "impressions" / old / "report.json").write_text("{}")
            r = c.post("/v1/forecasts", json=body)
            assert r.status_code == 409, r.text
            assert "damaged" in r.json()["error"]["message"]
    finally:
        ws.close()


def test_leftover_temporary_model_folders_are_cleaned_at_start(copy_home: Path, embedder) -> None:
    base = copy_home / "forecasters" / "impressions"
    dead = subprocess.run(
        [sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True, check=True
    ).stdout.strip()
    (base / f".tmp-20990101T000000000Z-{dead}" / "quantiles").mkdir(parents=True)
    live = base / f".tmp-20990101T000000001Z-{os.getpid()}"  # a training still running
    live.mkdir()
    open_ws(copy_home, embedder).close()
    assert sorted(p.name for p in base.iterdir() if p.name.startswith(".")) == [live.name]


# 15.3 One writer at a time ---------------------------------------------------


def test_two_processes_importing_overlapping_files(workspace: Workspace, tmp_path: Path) -> None:
    """The issue's repro: two `sounding import` processes, overlapping files,
    SOUNDING_IMPORT_BATCH_ROWS=50. Before the fix the index missed posts yet
    claimed to match the store."""
    home = workspace.settings.resolved_home
    workspace.close()
    a = write_csv(tmp_path / "a.csv", rows(250, prefix="ov"))
    b = write_csv(tmp_path / "b.csv", rows(250, prefix="ov", start=150))  # 100 shared rows
    env = {
        **os.environ,
        "SOUNDING_HOME": str(home),
        "PYTHONPATH": str(ROOT),
        "SOUNDING_IMPORT_BATCH_ROWS": "50",
    }
    cmd = [
        sys.executable,
        "-c",
        "from service.cli import main; main()",
        "import",
        "--new-account",
        "--timezone",
        "UTC",
    ]
    procs = [
        subprocess.Popen([*cmd, str(f)], env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        for f in (a, b)
    ]
    outs = [p.communicate(timeout=900) for p in procs]
    for p, (_out, err) in zip(procs, outs, strict=True):
        assert p.returncode == 0, err[-2000:]
        assert "Traceback" not in err
    ws = Workspace(settings=Settings(home=home), embedder=workspace.embedder)
    try:
        assert ws.store.counts()["posts"] == 400  # 250 + 250 - 100 shared
        assert ws.index_state()["state"] == "ready"
        assert index_matches_store(ws)
        texts = [r[2] for r in rows(400, prefix="ov")]
        vecs = ws.embedder.encode(texts)
        hits = ws.retrieval.nearest(vecs, 1)
        found = ws.store.posts_by_pk([h[0][0] for h in hits])
        # Every post is found by its own text (cosine 1 with itself).
        assert [found[h[0][0]]["text"] for h in hits] == texts
    finally:
        ws.close()


def test_forget_during_an_import_leaves_nothing_searchable(make_workspace, tmp_path: Path) -> None:
    """An import (as the API runs it) and a forget from another workspace (as
    the CLI runs it) at once: the forgotten texts are not searchable after,
    and the account is not re-created."""
    ws = make_workspace("home", import_batch_rows=50)
    ws.store.set_account("gone", timezone="Europe/London")
    ws.import_csv(
        write_csv(tmp_path / "old.csv", rows(60, prefix="old", accounts=("gone",))),
        ImportOptions(new_accounts="UTC"),
    )
    other = make_workspace("home")  # the same data directory, its own locks
    started, resume = threading.Event(), threading.Event()
    failures: list[BaseException] = []

    def progress(done: int, total: int | None = None) -> None:
        started.set()
        resume.wait(60)

    def importer() -> None:
        try:
            ws.import_csv(
                write_csv(tmp_path / "new.csv", rows(200, prefix="new", accounts=("gone", "kept"))),
                ImportOptions(new_accounts="UTC"),
                progress=progress,
            )
        except BaseException as exc:  # reported below
            failures.append(exc)

    def forgetter() -> None:
        try:
            other.forget(account="gone")
        except BaseException as exc:  # reported below
            failures.append(exc)

    t1 = threading.Thread(target=importer)
    t1.start()
    assert started.wait(300), "the import never reported a batch"
    t2 = threading.Thread(target=forgetter)
    t2.start()
    time.sleep(1)  # let the forget reach the lock (ordering only, nothing is timed)
    resume.set()
    t1.join(600)
    t2.join(600)
    assert not failures, failures
    assert [a.handle for a in ws.store.accounts()] == ["kept"]
    for w in (ws, other):
        assert index_matches_store(w)
        forgotten = [r[2] for r in rows(200, prefix="new", accounts=("gone", "kept"))[::2]]
        for p in w.precedents(forgotten[0], k=20) + w.precedents(forgotten[-1], k=20):
            assert p.account == "kept"


def test_overlapping_api_imports_both_succeed(workspace: Workspace, tmp_path: Path) -> None:
    """Two uploads at once through the real server: before, one answered 500
    with an IntegrityError."""
    ws = Workspace(
        settings=Settings(home=workspace.settings.resolved_home, token=TOKEN, import_batch_rows=50),
        embedder=workspace.embedder,
    )
    files = [
        write_csv(tmp_path / "a.csv", rows(150, prefix="api")),
        write_csv(tmp_path / "b.csv", rows(150, prefix="api", start=100)),
    ]
    answers: list[httpx.Response] = []
    with serve(create_app(workspace=ws)) as url:

        def upload(path: Path) -> None:
            with path.open("rb") as f:
                answers.append(
                    httpx.post(
                        f"{url}/v1/imports",
                        headers=AUTH,
                        timeout=600,
                        files={"file": (path.name, f, "text/csv")},
                        data={"new_account": "true", "timezone": "UTC"},
                    )
                )

        threads = [threading.Thread(target=upload, args=(p,)) for p in files]
        for t in threads:
            t.start()
        for t in threads:
            t.join(900)
    assert sorted(r.status_code for r in answers) == [200, 200], [r.text for r in answers]
    assert ws.store.counts()["posts"] == 250
    assert index_matches_store(ws)
    ws.close()


def test_a_second_writer_gets_busy_not_a_traceback(workspace: Workspace, tmp_path: Path) -> None:
    home = workspace.settings.resolved_home
    ws = Workspace(
        settings=Settings(home=home, token=TOKEN, write_wait_seconds=0.2), embedder=workspace.embedder
    )
    held = filelock.FileLock(str(home / LOCK_FILE))  # another process's writer
    csv_file = write_csv(tmp_path / "x.csv", rows(5, prefix="busy"))
    with held:
        with pytest.raises(Busy, match="another sounding process"):
            ws.import_csv(csv_file, ImportOptions(new_accounts="UTC"))
        with TestClient(create_app(workspace=ws)) as c, csv_file.open("rb") as f:
            r = c.post(
                "/v1/imports",
                headers=AUTH,
                files={"file": ("x.csv", f, "text/csv")},
                data={"new_account": "true", "timezone": "UTC"},
            )
        assert r.status_code == 409 and r.json()["error"]["code"] == "busy"
        use_embedder(workspace.embedder)
        r = CliRunner().invoke(
            cli_app,
            ["import", "--new-account", "--timezone", "UTC", str(csv_file)],
            env={"SOUNDING_HOME": str(home), "SOUNDING_WRITE_WAIT_SECONDS": "0.2"},
        )
        assert r.exit_code == 1 and r.output.startswith("Error: cannot start an import")
        assert "Traceback" not in r.output
    assert (
        ws.import_csv(csv_file, ImportOptions(new_accounts="UTC")).added == 5
    )  # once the other writer is done
    ws.close()


def test_the_index_is_rebuilt_when_it_misses_posts(make_workspace, tmp_path: Path) -> None:
    """A writer that bypasses the lock (an older version, a script) adds posts
    in the middle of an import: the import's index may then not claim the
    store's fingerprint. Before the fix it did, while missing those posts."""
    ws = make_workspace("home", import_batch_rows=10)
    ws.import_csv(write_csv(tmp_path / "a.csv", rows(20, prefix="fp")), ImportOptions(new_accounts="UTC"))
    outside = write_csv(tmp_path / "b.csv", rows(10, prefix="fp", start=20))
    done: list[int] = []

    def progress(n: int, _total: int) -> None:
        if not done:  # once, between two batches of the import below
            done.append(import_csv(ws.store, ws.embedder, outside, ImportOptions(new_accounts="UTC")).added)

    ws.import_csv(
        write_csv(tmp_path / "c.csv", rows(30, prefix="fp", start=30)),
        ImportOptions(new_accounts="UTC"),
        progress=progress,
    )
    assert done == [10]
    assert ws.store.counts()["posts"] == 60
    assert ws.index().ntotal == 60 and index_matches_store(ws)
    assert ws.index_state()["state"] == "ready"


# 15.5/15.7 A full disk ---------------------------------------------------------


@pytest.fixture()
def small_disk(tmp_path: Path) -> Iterator[Path]:
    mnt = tmp_path / "small"
    mnt.mkdir()
    r = subprocess.run(
        ["mount", "-t", "tmpfs", "-o", "size=4m", "tmpfs", str(mnt)], capture_output=True, text=True
    )
    if r.returncode != 0:
        pytest.skip(f"cannot mount a small tmpfs here (needs root and mount rights): {r.stderr.strip()}")
    try:
        yield mnt
    finally:
        subprocess.run(["umount", "-l", str(mnt)], check=False)


def fill(directory: Path, leave: int = 0) -> Path:
    """Fill the file system, then free ``leave`` bytes."""
    filler = directory / "filler"
    # Unbuffered: a buffered file would still hold the last partial chunk,
    # and closing it would raise the "no space" this loop is meant to reach.
    with filler.open("wb", buffering=0) as f:
        try:
            while True:
                f.write(b"\0" * 65536)
        except OSError:
            pass
    if leave:
        with filler.open("r+b") as f:
            f.truncate(max(filler.stat().st_size - leave, 0))
    return filler


def test_a_full_disk_is_an_ordinary_error(
    small_disk: Path, trained_home: Path, tmp_path: Path, embedder
) -> None:
    home = small_disk / "home"
    shutil.copytree(trained_home, home, ignore=shutil.ignore_patterns("forecasters"))
    ws = Workspace(settings=Settings(home=home, import_batch_rows=50), embedder=embedder)
    try:
        before = ws.store.counts()["posts"]
        fill(small_disk, leave=256 * 1024)
        with pytest.raises(StoreError) as err:
            ws.import_csv(
                write_csv(tmp_path / "more.csv", rows(2000, prefix="full")), ImportOptions(new_accounts="UTC")
            )
        msg = str(err.value)
        assert "new posts were stored" in msg and "the rest of the file was not" in msg
        assert "Traceback" not in msg
        added = int(msg.split(" new posts were stored")[0].rsplit(" ", 1)[-1])
        assert ws.store.counts()["posts"] == before + added < before + 2000
        print(f"full disk: {added} of 2000 new posts stored before the disk filled")
        # Reads go on from the index in memory, although it cannot be saved.
        fresh = Workspace(settings=Settings(home=home), embedder=embedder)
        shutil.rmtree(home / "index", ignore_errors=True)  # forces a rebuild it cannot save
        fill(small_disk)
        text = rows(1, prefix="base")[0][2]
        top = fresh.precedents(str(text), k=1)[0]
        assert top.text == text and top.similarity > 0.999  # cosine 1 with itself
        assert index_matches_store(fresh)
        assert not list((home / "index").glob("*.tmp*"))  # no partial index or step file left
        # Training on the full disk: a clean error and no temporary folder.
        with pytest.raises(StoreError, match="could not be saved"):
            forecasting.train(fresh, "impressions", backtest=False)
        leftovers = list((home / "forecasters").rglob(".tmp-*"))
        assert leftovers == []
        fresh.close()
    finally:
        ws.close()


# 15.6/15.8 Backups, read-only stores, handles with "/" -------------------------


def test_backup_into_a_new_directory(workspace: Workspace, tmp_path: Path) -> None:
    workspace.import_csv(
        write_csv(tmp_path / "a.csv", rows(10, prefix="bk")), ImportOptions(new_accounts="UTC")
    )
    use_embedder(workspace.embedder)
    target = tmp_path / "backups" / "nightly"
    r = CliRunner().invoke(
        cli_app, ["backup", f"{target}/"], env={"SOUNDING_HOME": str(workspace.settings.resolved_home)}
    )
    assert r.exit_code == 0, r.output
    made = list(target.iterdir())
    assert len(made) == 1 and made[0].name.startswith("sounding-backup-")
    assert made[0].suffix == ".db"
    con = __import__("sqlite3").connect(made[0])
    assert con.execute("SELECT COUNT(*) FROM posts").fetchone()[0] == 10
    con.close()


def test_an_interrupted_backup_leaves_no_plausible_file(
    workspace: Workspace, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    workspace.import_csv(
        write_csv(tmp_path / "a.csv", rows(10, prefix="bk")), ImportOptions(new_accounts="UTC")
    )
    dest = tmp_path / "copies" / "team.db"

    def killed(*_a: object) -> None:  # stands in for a kill just before the rename
        raise KeyboardInterrupt

    monkeypatch.setattr("service.storage.store.os.replace", killed)
    with pytest.raises(KeyboardInterrupt):
        workspace.store.backup(dest)
    assert not dest.exists()
    assert [p for p in dest.parent.iterdir() if not p.name.startswith(".tmp-")] == []


@pytest.fixture()
def read_only_home(copy_home: Path, tmp_path: Path, embedder) -> Iterator[Path]:
    open_ws(copy_home, embedder).close()  # the last connection checkpoints the WAL
    mnt = tmp_path / "ro"
    mnt.mkdir()
    r = subprocess.run(["mount", "--bind", str(copy_home), str(mnt)], capture_output=True, text=True)
    if r.returncode != 0:
        pytest.skip(f"cannot bind-mount here (needs root): {r.stderr.strip()}")
    try:
        subprocess.run(["mount", "-o", "remount,bind,ro", str(mnt)], check=True)
        yield mnt
    finally:
        subprocess.run(["umount", "-l", str(mnt)], check=False)


def test_a_read_only_directory_serves_reads_and_refuses_writes(
    read_only_home: Path, tmp_path: Path, embedder
) -> None:
    ws = open_ws(read_only_home, embedder)
    try:
        assert ws.read_only
        text = str(rows(1, prefix="base")[0][2])
        assert ws.precedents(text, k=1)[0].text == text
        f = ws.forecaster.forecast([Draft(text="Asters by the lake", account="garden")])[0]
        assert f.low <= f.median <= f.high
        for action in (
            ws.reindex,
            lambda: forecasting.train(ws, "impressions", backtest=False),
            lambda: ws.forget(account="garden"),
        ):
            with pytest.raises(ReadOnly, match="read-only; reads still work"):
                action()
        csv_file = write_csv(tmp_path / "x.csv", rows(3, prefix="ro"))
        with TestClient(create_app(workspace=ws)) as c, csv_file.open("rb") as fh:
            r = c.post(
                "/v1/imports",
                headers=AUTH,
                files={"file": ("x.csv", fh, "text/csv")},
                data={"new_account": "true", "timezone": "UTC"},
            )
            assert r.status_code == 503 and r.json()["error"]["code"] == "read_only"
            assert c.get("/v1/health").json()["read_only"] is True
        use_embedder(embedder)
        for args in (["train"], ["reindex"]):
            r = CliRunner().invoke(cli_app, args, env={"SOUNDING_HOME": str(read_only_home)})
            assert r.exit_code == 1 and "read-only" in r.output and "Traceback" not in r.output
    finally:
        ws.close()


def test_a_handle_with_a_slash_can_be_forgotten_over_http(workspace: Workspace, tmp_path: Path) -> None:
    """Handles with a slash are refused now; one left by an older store can still go."""
    from datetime import datetime

    from service.storage.tables import Account

    ws = open_ws(workspace.settings.resolved_home, workspace.embedder)
    with ws.store.session() as s:
        s.add(Account(handle="team/news", timezone="UTC", created_at=datetime(2026, 1, 1)))
    with TestClient(create_app(workspace=ws)) as c:
        r = c.delete("/v1/accounts/team/news", headers=AUTH)
    assert r.status_code == 200, r.text
    assert r.json()["deleted"] == 0 and ws.store.accounts() == []
    ws.close()


# 15.7 The local service defends itself ------------------------------------------


@pytest.fixture()
def client(workspace: Workspace) -> Iterator[TestClient]:
    ws = Workspace(
        settings=Settings(home=workspace.settings.resolved_home, token=TOKEN, max_json_bytes=2000),
        embedder=workspace.embedder,
    )
    with TestClient(create_app(workspace=ws, bound_host="127.0.0.1")) as c:
        yield c
    ws.close()


@pytest.mark.parametrize(
    "host", ["evil.example", "evil.example:8000", "127.0.0.1.evil.example", "localhost.evil.example"]
)
def test_unknown_host_names_are_refused(client: TestClient, host: str) -> None:
    # DNS rebinding: the attacker's page sends its own name as Host (RFC 9110 7.2).
    r = client.get("/v1/accounts", headers={"Host": host})
    assert r.status_code == 400 and r.json()["error"]["code"] == "unknown_host"


@pytest.mark.parametrize("host", ["127.0.0.1:8000", "localhost", "LOCALHOST:1", "[::1]:8000", "testserver"])
def test_own_host_names_are_answered(client: TestClient, host: str) -> None:
    assert client.get("/v1/accounts", headers={"Host": host}).status_code == 200


def test_json_bodies_are_capped_before_parsing(client: TestClient) -> None:
    # Not JSON at all: a parser would answer 422, the cap answers 413 first.
    junk = b"[" * 5000
    r = client.post("/v1/precedents", content=junk, headers={"content-type": "application/json"})
    assert r.status_code == 413 and r.json()["error"]["limit"] == "max_json_bytes"

    def chunks() -> Iterator[bytes]:  # no Content-Length: chunked transfer
        for _ in range(10):
            yield b"[" * 500

    r = client.post("/v1/precedents", content=chunks(), headers={"content-type": "application/json"})
    assert r.status_code == 413
    r = client.post("/v1/precedents", json={"text": "x" * 100, "k": 0})
    assert r.status_code == 422  # small bodies still reach validation


def test_slow_and_idle_connections_are_closed(workspace: Workspace) -> None:
    settings = Settings(
        home=workspace.settings.resolved_home, header_timeout_seconds=0.5, body_timeout_seconds=1.0
    )
    app = create_app(workspace=workspace, bound_host="127.0.0.1")
    sock = socket.socket()
    sock.bind(("127.0.0.1", 0))
    port = sock.getsockname()[1]
    server = uvicorn.Server(
        uvicorn.Config(app, http=guard.protocol(settings), log_level="warning", timeout_keep_alive=1)
    )
    th = threading.Thread(target=server.run, kwargs={"sockets": [sock]}, daemon=True)
    th.start()
    while not server.started:
        time.sleep(0.05)

    def closed_by_server(first: bytes) -> bool:
        c = socket.create_connection(("127.0.0.1", port))
        c.settimeout(60)  # generous: we wait for the server to hang up, not time it
        try:
            if first:
                c.sendall(first)
            while True:
                data = c.recv(4096)
                if not data:
                    return True
        except TimeoutError:
            return False
        finally:
            c.close()

    try:
        assert closed_by_server(b"")  # connects and sends nothing
        assert closed_by_server(b"GET /v1/health HTTP/1.1\r\nHost: 127.0.0.1\r\n")  # no end
        assert closed_by_server(
            b"POST /v1/precedents HTTP/1.1\r\nHost: 127.0.0.1\r\n"
            b"Content-Type: application/json\r\nContent-Length: 100\r\n\r\n{"
        )
        # A whole request is still answered.
        r = httpx.get(f"http://127.0.0.1:{port}/v1/accounts")
        assert r.status_code == 200
    finally:
        server.should_exit = True
        th.join(30)
        sock.close()


def test_a_public_bind_needs_a_long_token() -> None:
    with pytest.raises(InputError, match="fewer than 32 characters"):
        check_bind("0.0.0.0", Settings(token="x"))
    with pytest.raises(InputError, match="fewer than 32 characters"):
        check_bind("192.0.2.10", Settings(token="a" * 31))
    check_bind("0.0.0.0", Settings(token="a" * 32))
    check_bind("127.0.0.1", Settings(token="x"))  # loopback: any token


def test_error_bodies_carry_no_server_paths(client: TestClient, monkeypatch) -> None:
    ws = client.app.state.workspace  # type: ignore[attr-defined]
    home = str(ws.settings.resolved_home)

    def broken() -> list:
        raise StoreError(f"cannot read {home}/sounding.db", where=f"{home}/index/config.json")

    monkeypatch.setattr(ws.store, "accounts", broken)
    r = client.get("/v1/accounts")
    assert r.status_code == 503
    assert home not in r.text and "sounding.db" in r.text and "config.json" in r.text


def test_docs_work_offline(client: TestClient) -> None:
    page = client.get("/docs")
    assert page.status_code == 200
    assert "https://" not in page.text and "http://" not in page.text
    for asset in ("swagger-ui-bundle.js", "swagger-ui.css"):
        assert f"/docs-assets/{asset}" in page.text
        assert client.get(f"/docs-assets/{asset}").status_code == 200
    # The bundled Swagger UI names the versions it reads ("openapi: 3.0.n",
    # in its own bundle): the page gets the schema as 3.0.3.
    bundle = client.get("/docs-assets/swagger-ui-bundle.js").text
    assert "openapi: 3.0.n" in bundle
    assert client.get("/docs/openapi.json").json()["openapi"] == "3.0.3"
