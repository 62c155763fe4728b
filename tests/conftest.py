"""Shared fixtures: the real embedding model, loaded once per session, and
data directories under tmp_path."""

from __future__ import annotations

import csv
import io
import os
import shutil
from collections.abc import Iterator, Sequence
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

os.environ.setdefault("HF_HUB_OFFLINE", "1")
# Starlette's TestClient sends "Host: testserver"; the service answers only
# host names it knows (service.api.guard), so the tests name that one.
os.environ.setdefault("SOUNDING_ALLOWED_HOSTS", '["testserver"]')

from support.pgsupport import (
    HOMES,
    SERVER,
    copy_home_to_postgres,
    create_database,
    drop_database,
    every_home_on_postgres,
    release,
)

from models.embedding import Embedder
from service.forecast.training import train
from service.settings import Settings
from service.workspace import Workspace

ROOT = Path(__file__).resolve().parents[1]
DEMO_CSV = ROOT / "demo_data" / "posts.csv"
ARTIFACTS = ROOT / "test-artifacts"

#: The bearer token of every test server that allows changes.
TOKEN = "sounding-test-token-7f3a9c-5d1e8b2a4c6f"  # 32+ characters: needed off loopback
AUTH = {"Authorization": f"Bearer {TOKEN}"}
#: The "now" every test trains and forecasts at, so results never depend on
#: the system date: a day after the demo history's last month.
NOW = datetime(2026, 12, 1, 12, 0, tzinfo=UTC)

SUBJECTS = (
    "Magnolias",
    "Snowdrops",
    "The bee hotel",
    "The seed library",
    "The fern house",
    "The rose arbour",
    "The herb garden",
    "The lake path",
)
NEWS = (
    "open early",
    "need volunteers",
    "are in full colour",
    "get a new bench",
    "host a sketching morning",
    "close for repairs",
)


def history_csv(
    n: int,
    *,
    prefix: str = "h",
    accounts: Sequence[str] = ("loomhaven",),
    start: datetime = datetime(2025, 2, 1, 9, tzinfo=UTC),
    step_hours: float = 4.0,
    bad_line: int | None = None,
    engagements: bool = False,
) -> bytes:
    """A small invented history in our canonical columns (post_id, account,
    text, posted_at, impressions), one post every ``step_hours``, accounts in
    turn; the row on ``bad_line`` (the header is line 1) gets a negative count.
    With ``engagements``, an engagements column too (every 10th post has no
    impressions, so no engagement rate)."""
    buf = io.StringIO()
    w = csv.writer(buf)
    w.writerow(
        ["post_id", "account", "text", "posted_at", "impressions"] + (["engagements"] if engagements else [])
    )
    for i in range(n):
        impressions = -5 if i + 2 == bad_line else 100 + 7 * i
        row: list[object] = [
            f"{prefix}-{i}",
            accounts[i % len(accounts)],
            f"{SUBJECTS[i % 8]} {NEWS[i % 6]} ({prefix} note {i})",
            (start + timedelta(hours=step_hours * i)).isoformat(),
            impressions,
        ]
        if engagements:
            row[-1] = 0 if i % 10 == 9 else impressions
            row.append(3 + (i * 37) % 11 + (5 if i % 8 < 2 else 0))
        w.writerow(row)
    return buf.getvalue().encode()


@pytest.fixture(scope="session")
def embedder() -> Embedder:
    """The bundled all-MiniLM-L6-v2, loaded once for the whole run."""
    e = Embedder()
    e.encode(["warm up"])
    return e


@pytest.fixture()
def make_workspace(tmp_path: Path, embedder: Embedder, monkeypatch: pytest.MonkeyPatch):
    """Factory of empty workspaces in tmp_path; settings as keyword overrides."""
    made: list[Workspace] = []

    def make(name: str = "home", **overrides: object) -> Workspace:
        home = tmp_path / name
        ws = Workspace(settings=Settings(home=home, **overrides), embedder=embedder)
        made.append(ws)
        return ws

    yield make
    for ws in made:
        ws.close()


@pytest.fixture()
def workspace(make_workspace) -> Workspace:
    return make_workspace()


def _build_demo(home: Path, embedder: Embedder) -> None:
    from service.cli.history import _demo_accounts

    ws = Workspace(settings=Settings(home=home), embedder=embedder)
    for handle, name, tz in _demo_accounts():
        ws.store.set_account(handle, display_name=name, timezone=tz)
    ws.import_csv(DEMO_CSV)
    train(ws, "impressions", now=NOW)  # one model for every test that forecasts
    ws.close()


@pytest.fixture(scope="session")
def demo_home(tmp_path_factory: pytest.TempPathFactory, embedder: Embedder) -> Path:
    """A data directory holding the imported demo history and a trained
    impressions model (built once per run).

    Tests that change data must copy it (``demo_copy``) rather than write here.
    """

    from filelock import FileLock

    home = tmp_path_factory.mktemp("demo") / "home"
    if os.environ.get("PYTEST_XDIST_WORKER") is None:
        _build_demo(home, embedder)
        return home
    # Under xdist, one worker builds it while the others wait, rather than
    # each building it again on the same cores (a minute and a half each);
    # then every worker takes a private copy, as it had its own before.
    shared = tmp_path_factory.getbasetemp().parent / "demo-built"
    with FileLock(f"{shared}.lock"):
        if not (shared / "complete").is_file():
            shutil.rmtree(shared, ignore_errors=True)
            _build_demo(shared / "home", embedder)
            (shared / "complete").touch()
    shutil.copytree(shared / "home", home)
    return home


#: The store backends a module marked ``both_backends`` runs on, in turn.
BACKENDS = ["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)]
both_backends = pytest.mark.both_backends


def pytest_generate_tests(metafunc: pytest.Metafunc) -> None:
    """A module marked ``both_backends`` runs all its tests on SQLite, then again
    on PostgreSQL (skipped without a server); every other module on SQLite."""
    if "backend" in metafunc.fixturenames and metafunc.definition.get_closest_marker("both_backends"):
        metafunc.parametrize("backend", BACKENDS, indirect=True, scope="module")


@pytest.fixture(scope="module", autouse=True)
def backend(request: pytest.FixtureRequest) -> Iterator[str]:
    """The store backend of this module's tests. On PostgreSQL, every data
    directory a test makes gets a database of its own."""
    name = getattr(request, "param", "sqlite")
    if name == "sqlite":
        yield name
        return
    if not SERVER:
        pytest.skip("SOUNDING_TEST_POSTGRES_URL is not set (start a server with .ci/start-postgres)")
    with every_home_on_postgres():
        yield name


@pytest.fixture(scope="session")
def sqlite_demo_workspace(demo_home: Path, embedder: Embedder) -> Iterator[Workspace]:
    ws = Workspace(settings=Settings(home=demo_home), embedder=embedder)
    yield ws
    ws.close()


@pytest.fixture(scope="module")
def backend_demo_home(
    backend: str, demo_home: Path, tmp_path_factory: pytest.TempPathFactory
) -> Iterator[Path]:
    """The demo data directory on this module's backend (on PostgreSQL, the
    SQLite demo copied row for row into a database of its own)."""
    if backend == "sqlite":
        yield demo_home
        return
    home = tmp_path_factory.mktemp("pgdemo") / "home"
    copy_home_to_postgres(demo_home, home)
    yield home
    release(home)


@pytest.fixture(scope="module")
def demo_workspace(
    backend: str, backend_demo_home: Path, sqlite_demo_workspace: Workspace, embedder: Embedder
) -> Iterator[Workspace]:
    """A read-only workspace over the demo history, on this module's backend."""
    if backend == "sqlite":
        yield sqlite_demo_workspace
        return
    ws = Workspace(
        settings=Settings(home=backend_demo_home, database_url=HOMES[backend_demo_home.resolve()]),
        embedder=embedder,
    )
    assert ws.store.backend == "postgresql"
    yield ws
    ws.close()


@pytest.fixture()
def demo_copy(
    backend: str, backend_demo_home: Path, tmp_path: Path, embedder: Embedder
) -> Iterator[Workspace]:
    """A private, writable copy of the demo data directory, on this module's backend."""
    home = tmp_path / "demo-copy"
    if backend == "sqlite":
        shutil.copytree(backend_demo_home, home)
        settings = Settings(home=home)
    else:
        settings = Settings(home=home, database_url=copy_home_to_postgres(backend_demo_home, home))
    ws = Workspace(settings=settings, embedder=embedder)
    yield ws
    ws.close()
    if backend != "sqlite":
        release(home)


@pytest.fixture(scope="session")
def artifacts() -> Path:
    ARTIFACTS.mkdir(exist_ok=True)
    return ARTIFACTS


@pytest.fixture(params=["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)])
def database_url(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[str]:
    """An empty store's URL on each backend: a SQLite file, and a new
    PostgreSQL database when SOUNDING_TEST_POSTGRES_URL names a server
    (skipped otherwise)."""
    if request.param == "sqlite":
        yield f"sqlite:///{tmp_path / 'store.db'}"
        return
    if not SERVER:
        pytest.skip("SOUNDING_TEST_POSTGRES_URL is not set (start a server with .ci/start-postgres)")
    url = create_database()
    yield url
    drop_database(url)
