"""Follower counts over time and the metrics per 1,000 followers: the count in
force at a post's time, missing (never guessed) before an account's first
count; on SQLite and PostgreSQL."""

from __future__ import annotations

import bisect
import csv
import io
from collections.abc import Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from conftest import NOW, history_csv
from typer.testing import CliRunner

from models.embedding import Embedder
from models.errors import InputError
from models.metrics import target_values
from service.analysis.distribution import distribution
from service.analysis.trends import TrendRequest, trends
from service.cli import app as cli_app
from service.cli.base import use_embedder
from service.forecast.draft import Draft
from service.forecast.training import train
from service.ingest.options import ImportOptions
from service.segments.request import SegmentRequest
from service.segments.segmenting import segment
from service.settings import Settings
from service.storage.followers import as_of
from service.workspace import Workspace

pytestmark = pytest.mark.both_backends

ACCOUNTS = ("loomhaven", "loomhaven_lab")
N = 360
START = datetime(2025, 2, 1, 9, tzinfo=UTC)  # history_csv's first post
STEP = timedelta(hours=4)
PER_1K = "impressions_per_1k_followers"
#: (account, since, followers): loomhaven counted before its first post and
#: twice later; loomhaven_lab only from its 61st post on.
COUNTS = [
    ("loomhaven", START - timedelta(days=30), 2_000),
    ("loomhaven", START + 100 * STEP, 2_600),
    ("loomhaven", START + 240 * STEP + timedelta(minutes=30), 3_100),
    ("loomhaven_lab", START + 121 * STEP, 800),
]


def count_at(account: str, t: datetime) -> int | None:
    """The count in force, by a plain reading of the rule: the latest count of
    the account taken at or before t (independent of the code under test)."""
    mine = sorted((since, n) for a, since, n in COUNTS if a == account)
    i = bisect.bisect_right([since for since, _ in mine], t)
    return mine[i - 1][1] if i else None


def rows() -> list[dict[str, str]]:
    data = history_csv(N, prefix="f", accounts=ACCOUNTS)
    return list(csv.DictReader(io.StringIO(data.decode())))  # RFC 4180 reader


@pytest.fixture(scope="module")
def ws(backend: str, tmp_path_factory: pytest.TempPathFactory, embedder: Embedder) -> Iterator[Workspace]:
    root = tmp_path_factory.mktemp("followers")
    w = Workspace(settings=Settings(home=root / "home"), embedder=embedder)
    (root / "h.csv").write_bytes(history_csv(N, prefix="f", accounts=ACCOUNTS))
    w.import_csv(root / "h.csv", ImportOptions(new_accounts="UTC"))
    for account, since, n in COUNTS:
        w.change_account(account, followers=n, since=since)
    yield w
    w.close()


def test_as_of_matches_merge_asof_and_a_plain_reading() -> None:
    rng = np.random.default_rng(7)
    accounts = rng.choice(["a", "b", "c"], 400)
    times = rng.uniform(0, 1000, 400)
    c_accounts = rng.choice(["a", "b", "d"], 30)
    c_times = rng.uniform(100, 900, 30)
    counts = rng.integers(1, 10_000, 30).astype(float)
    got = as_of(accounts, times, c_accounts, c_times, counts)
    # pandas' merge_asof (backward, by account) is the reference join.
    left = pd.DataFrame({"account": accounts, "t": times, "i": np.arange(400)}).sort_values("t")
    right = pd.DataFrame({"account": c_accounts, "t": c_times, "n": counts}).sort_values("t")
    ref = pd.merge_asof(left, right, on="t", by="account", direction="backward").sort_values("i")
    np.testing.assert_array_equal(got, ref["n"].to_numpy())
    # And a plain loop: the latest count of the post's account at or before its time.
    for k in range(0, 400, 37):
        earlier = [
            (t, n)
            for a, t, n in zip(c_accounts, c_times, counts, strict=True)
            if a == accounts[k] and t <= times[k]
        ]
        assert (got[k] == max(earlier)[1]) if earlier else np.isnan(got[k])


def test_each_post_reads_the_count_in_force_at_its_time(ws: Workspace) -> None:
    frame = ws.store.posts_frame()
    expected = [
        count_at(a, t.to_pydatetime()) for a, t in zip(frame["account"], frame["posted_at"], strict=True)
    ]
    got = frame["followers"].to_numpy()
    assert [None if np.isnan(x) else int(x) for x in got] == expected
    # Per 1,000 followers (common practice, no source): impressions / followers x 1,000.
    by_id = {r["post_id"]: int(r["impressions"]) for r in rows()}
    per_1k = target_values(frame, PER_1K)
    for pid, value, n in zip(frame["post_id"], per_1k, expected, strict=True):
        if n is None:
            assert np.isnan(value), pid  # missing, not guessed
        else:
            assert value == pytest.approx(by_id[pid] / n * 1000)
    # A precedent carries the count beside its metrics.
    p = ws.precedents("Magnolias open early (f note 0)", k=1, now=NOW)[0]
    assert p.post_id == "f-0" and p.followers == 2_000


def missing() -> int:
    """Posts with impressions and no count in force: loomhaven_lab's first 60."""
    return sum(1 for i in range(N) if ACCOUNTS[i % 2] == "loomhaven_lab" and i < 121)


def test_missing_counts_leave_the_metric_out_and_say_so(ws: Workspace) -> None:
    assert missing() == 60  # posts 1, 3, ..., 119; post 121 is counted at its very time
    seg = segment(ws, SegmentRequest(by="account", metric=PER_1K), now=NOW)
    assert seg.n_posts == N - missing()
    assert seg.left_out.no_followers == seg.left_out.no_metric == missing()
    assert any("no follower count" in w for w in seg.warnings)
    d = distribution(ws, metric=PER_1K, now=NOW)
    assert d.left_out.no_followers == missing() and d.n_posts == N - missing()
    t = trends(ws, TrendRequest(metric=PER_1K), now=NOW)
    assert t.left_out.no_followers == missing()
    # The plain metric is untouched by the counts.
    assert segment(ws, SegmentRequest(by="account"), now=NOW).left_out.no_followers == 0


def test_training_on_impressions_per_1k_followers(ws: Workspace) -> None:
    m = train(ws, PER_1K, now=NOW, backtest=False)
    assert m.report["n_posts"] == N - missing()
    assert m.report["n_without_followers"] == missing()
    frame = ws.store.posts_frame()
    values = target_values(frame, PER_1K)
    values = values[np.isfinite(values)]
    f = ws.forecaster.forecast(
        [Draft(text="The fern house gets a new bench", account="loomhaven", planned_at=NOW)],
        metric=PER_1K,
        now=NOW,
    )[0]
    assert f.metric == PER_1K and f.model_version == m.version
    assert 0 < f.low <= f.median <= f.high
    # A quantile model's middle estimate stays among the values it learnt from.
    assert values.min() <= f.median <= values.max()


def test_a_followers_column_at_import_dates_each_count_by_its_post(make_workspace, tmp_path: Path) -> None:
    w = make_workspace()
    path = tmp_path / "with_followers.csv"
    path.write_text(
        "post_id,account,text,posted_at,impressions,followers\n"
        "a-1,loomhaven,Snowdrops open early,2025-03-01T10:00:00Z,500,1 250\n"
        "a-2,loomhaven,The lake path closes for repairs,2025-03-05T10:00:00Z,800,\n"
        "a-3,loomhaven,The herb garden needs volunteers,2025-03-09T10:00:00Z,900,1.5K\n"
        "a-4,loomhaven,The bee hotel gets a new bench,2025-03-10T10:00:00Z,700,many\n",
        encoding="utf-8",
    )
    summary = w.import_csv(path, ImportOptions(new_accounts="UTC"))
    assert summary.added == 3 and [(p.line, p.column) for p in summary.problems] == [(5, "followers")]
    assert [(t.isoformat(), n) for _, t, n in w.store.follower_counts()] == [
        ("2025-03-01T10:00:00+00:00", 1250),
        ("2025-03-09T10:00:00+00:00", 1500),
    ]
    frame = w.store.posts_frame()
    assert frame["followers"].tolist() == [1250, 1250, 1500]  # a-2 reads a-1's count


def test_the_account_command_records_a_count(ws: Workspace, embedder: Embedder) -> None:
    use_embedder(embedder)
    env = {"SOUNDING_HOME": str(ws.settings.resolved_home)}
    runner = CliRunner()
    res = runner.invoke(cli_app, ["account", "loomhaven_lab", "--since", "2025-01-01"], env=env)
    assert res.exit_code == 1 and "give --followers" in res.output
    res = runner.invoke(cli_app, ["account", "loomhaven_lab", "--followers", "-3"], env=env)
    assert res.exit_code == 1 and "follower count" in res.output
    with pytest.raises(InputError, match="follower count"):
        ws.change_account("loomhaven_lab", followers=10**11)
    assert len(ws.store.follower_counts(["loomhaven_lab"])) == 1  # nothing written
    res = runner.invoke(
        cli_app,
        ["account", "fernbrook_park", "--reference", "--followers", "15000", "--since", "2025-06-01"],
        env=env,
    )
    assert res.exit_code == 0, res.output
    assert "reference account" in res.output and "15,000 followers from 2025-06-01" in res.output
    assert ws.store.follower_counts(["fernbrook_park"]) == [
        ("fernbrook_park", datetime(2025, 6, 1, tzinfo=UTC), 15_000)
    ]
    listed = runner.invoke(cli_app, ["accounts"], env=env, terminal_width=100)
    assert "fernbrook_park (reference)" in listed.output
    res = runner.invoke(cli_app, ["account", "fernbrook_park", "--team"], env=env)
    assert res.exit_code == 0 and not ws.store.account("fernbrook_park").reference


def test_a_version_3_store_gains_reference_marks_and_follower_counts(database_url: str) -> None:
    from sqlalchemy import create_engine, text

    from service.storage.migrations import SCHEMA_VERSION
    from service.storage.store import Store

    first = Store(url=database_url)
    first.set_account("loomhaven", timezone="UTC")
    first.close()
    eng = create_engine(database_url)
    with eng.begin() as c:  # back to the layout of version 3
        c.execute(text("ALTER TABLE accounts DROP COLUMN reference"))
        c.execute(text("DROP TABLE follower_counts"))
        c.execute(text("UPDATE schema_version SET version = 3"))
    store = Store(url=database_url)
    try:
        assert not store.account("loomhaven").reference  # existing accounts stay the team's
        store.set_account("fernbrook_park", reference=True)
        store.set_followers("loomhaven", 900, since=NOW)
        assert store.reference_handles() == {"fernbrook_park"}
        assert store.follower_counts() == [("loomhaven", NOW, 900)]
        with eng.connect() as c:
            assert c.execute(text("SELECT version FROM schema_version")).scalar() == SCHEMA_VERSION
    finally:
        store.close()
        eng.dispose()
