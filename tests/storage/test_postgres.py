"""A PostgreSQL store does the whole job as a SQLite one does: the same
history copied onto PostgreSQL gives the same forecasts and segments;
forget, copy-to and backup behave there too. The SQLite store, a different
storage engine read through its own driver, is the reference.

Needs SOUNDING_TEST_POSTGRES_URL (`.ci/start-postgres`); skipped without it.
"""

from __future__ import annotations

import csv
from collections.abc import Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest
from support.pgsupport import (
    copy_home_to_postgres,
    create_database,
    drop_database,
    needs_postgres,
    raw,
    release,
)
from typer.testing import CliRunner

from models.embedding import Embedder
from service.cli import app as cli_app
from service.cli.base import use_embedder
from service.forecast.draft import Draft
from service.ingest.options import ImportOptions
from service.segments.request import SegmentRequest
from service.segments.segmenting import segment
from service.settings import Settings
from service.workspace import Workspace

pytestmark = [needs_postgres]

NOW = datetime(2026, 11, 20, 12, tzinfo=UTC)  # after the demo history


@pytest.fixture(scope="module")
def pg_demo(
    demo_home: Path, embedder: Embedder, tmp_path_factory: pytest.TempPathFactory
) -> Iterator[Workspace]:
    """The conftest demo history (SQLite) copied onto a PostgreSQL database."""
    home = tmp_path_factory.mktemp("pgdemo") / "home"
    url = copy_home_to_postgres(demo_home, home)
    ws = Workspace(settings=Settings(home=home, database_url=url), embedder=embedder)
    yield ws
    ws.close()
    release(home)


@pytest.fixture()
def pg_url() -> Iterator[str]:
    url = create_database()
    yield url
    drop_database(url)


def write_csv(path: Path, n: int, *, prefix: str = "pg") -> Path:
    t0 = datetime(2025, 4, 1, 9, tzinfo=UTC)
    with path.open("w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["post_id", "account", "text", "posted_at", "impressions"])
        for i in range(n):
            w.writerow(
                [
                    f"{prefix}-{i}",
                    ("loomhaven", "loomhaven_lab")[i % 2],
                    (
                        f"Glasshouse note {i}: the {('orchids', 'ferns', 'cacti')[i % 3]} "
                        f"are {('flowering', 'repotted', 'watered')[i % 3]} ({prefix})."
                    ),
                    (t0 + timedelta(hours=7 * i)).isoformat(),
                    300 + 11 * i,
                ]
            )
    return path


def test_forecasts_match_the_sqlite_store(demo_workspace: Workspace, pg_demo: Workspace) -> None:
    assert (demo_workspace.store.backend, pg_demo.store.backend) == ("sqlite", "postgresql")
    drafts = [
        Draft(
            text="Snowdrops are out along the rill this week",
            account="loomhaven",
            planned_at=NOW + timedelta(days=1),
        ),
        Draft(
            text="Soil science open lab: bring a sample",
            account="loomhaven_lab",
            planned_at=NOW + timedelta(days=2, hours=3),
        ),
    ]
    ref = demo_workspace.forecaster.forecast(drafts, now=NOW)
    got = pg_demo.forecaster.forecast(drafts, now=NOW)
    for r, g in zip(ref, got, strict=True):
        assert g.model_version == r.model_version
        assert (g.low, g.median, g.high) == pytest.approx((r.low, r.median, r.high), rel=1e-9)
        assert [p.post_id for p in g.precedents] == [p.post_id for p in r.precedents]


def test_segments_match_the_sqlite_store(demo_workspace: Workspace, pg_demo: Workspace) -> None:
    req = SegmentRequest(by="hour")
    ref, got = segment(demo_workspace, req, now=NOW), segment(pg_demo, req, now=NOW)
    assert got.n_posts == ref.n_posts > 0
    r, g = ref.split("hour"), got.split("hour")
    assert [(s.name, s.n) for s in g.segments] == [(s.name, s.n) for s in r.segments]
    assert [s.median for s in g.segments] == pytest.approx([s.median for s in r.segments])


def test_forget_on_postgres(make_workspace, pg_url: str, tmp_path: Path) -> None:
    ws = make_workspace("pg", database_url=pg_url)
    ws.import_csv(write_csv(tmp_path / "a.csv", 12), ImportOptions(new_accounts="UTC"))
    ((pk, key),) = raw(pg_url, "SELECT id, vector_key FROM posts WHERE post_id = 'pg-3'")
    assert ws.forget(post_id="pg-3") == 1
    assert raw(pg_url, "SELECT COUNT(*) FROM snapshots WHERE post_pk = :pk", pk=pk) == [(0,)]
    assert raw(pg_url, "SELECT COUNT(*) FROM vectors WHERE key = :k", k=key) == [(0,)]
    found = {p.post_id for p in ws.precedents("Glasshouse note 3: the orchids", k=11)}
    assert found == {f"pg-{i}" for i in range(12)} - {"pg-3"}
    # loomhaven_lab has the odd-numbered posts, pg-3 already gone.
    assert ws.forget(account="loomhaven_lab") == 5
    assert raw(pg_url, "SELECT handle FROM accounts") == [("loomhaven",)]
    assert raw(pg_url, "SELECT COUNT(*) FROM posts") == [(6,)]
    # New rows after a forget get fresh ids (the sequence is PostgreSQL's own).
    s = ws.import_csv(write_csv(tmp_path / "b.csv", 4, prefix="more"), ImportOptions(new_accounts="UTC"))
    assert s.added == 4
    assert raw(pg_url, "SELECT COUNT(*) FROM posts") == [(10,)]


def test_copy_to_then_use_on_postgres(
    workspace: Workspace, embedder: Embedder, pg_url: str, tmp_path: Path
) -> None:
    workspace.import_csv(write_csv(tmp_path / "a.csv", 9), ImportOptions(new_accounts="UTC"))
    sqlite_url = workspace.settings.db_url
    use_embedder(embedder)
    runner = CliRunner()
    env = {"SOUNDING_HOME": str(workspace.settings.resolved_home)}
    r = runner.invoke(cli_app, ["copy-to", pg_url], env=env)
    assert r.exit_code == 0, r.output
    assert "copied 9 posts" in r.output
    q = (
        "SELECT a.handle, p.post_id, p.text, p.posted_at, s.impressions, v.data FROM posts p "
        "JOIN accounts a ON a.id = p.account_id JOIN snapshots s ON s.post_pk = p.id "
        "JOIN vectors v ON v.key = p.vector_key ORDER BY p.post_id"
    )

    # Each backend read through its own driver (sqlite3, psycopg): the same rows
    # (sqlite3 gives the time as ISO 8601 text, psycopg as a datetime).
    def norm(r: tuple) -> tuple:
        t = r[3] if isinstance(r[3], datetime) else datetime.fromisoformat(r[3])
        return (*r[:3], t, r[4], bytes(r[5]))

    assert [norm(r) for r in raw(pg_url, q)] == [norm(r) for r in raw(sqlite_url, q)]
    # Copying again into the now filled store is refused and changes nothing.
    r = runner.invoke(cli_app, ["copy-to", pg_url], env=env)
    assert r.exit_code == 1 and "is not empty" in r.output
    assert raw(pg_url, "SELECT COUNT(*) FROM posts") == [(9,)]
    # The copy takes new imports: ids continue past the copied ones.
    pg = Workspace(settings=Settings(home=tmp_path / "pg-home", database_url=pg_url), embedder=embedder)
    try:
        assert (
            pg.import_csv(
                write_csv(tmp_path / "b.csv", 3, prefix="new"), ImportOptions(new_accounts="UTC")
            ).added
            == 3
        )
    finally:
        pg.close()
    assert raw(pg_url, "SELECT COUNT(*) FROM posts") == [(12,)]


def test_backup_command_on_postgres_says_what_to_do(pg_url: str, tmp_path: Path, embedder: Embedder) -> None:
    use_embedder(embedder)
    env = {"SOUNDING_HOME": str(tmp_path / "home"), "SOUNDING_DATABASE_URL": pg_url}
    r = CliRunner().invoke(cli_app, ["backup", str(tmp_path / "copy.db")], env=env)
    assert r.exit_code == 1
    assert "pg_dump -Fc -f sounding.dump postgresql://" in r.output
    assert "pg_restore" in r.output
    assert not (tmp_path / "copy.db").exists()
