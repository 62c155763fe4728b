"""The team overview, checked figure by figure against pandas, numpy, scipy
and statsmodels on the generated history whose accounts, zones and hour
effect are known."""

from __future__ import annotations

import json
from datetime import UTC
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
import pytest
from conftest import NOW
from fastapi.testclient import TestClient
from scipy.stats import mannwhitneyu, theilslopes
from statsmodels.stats.multitest import multipletests
from support.team_history import ACCOUNTS, make_team
from typer.testing import CliRunner

from models.embedding import Embedder
from service.analysis.team import DEFAULT_MIN_POSTS, TeamOverview, team_overview
from service.analysis.topics import topics
from service.api.app import create_app
from service.cli import app
from service.cli.base import use_embedder

EDGES = (0, 6, 9, 12, 15, 18, 21, 24)  # the segments' hour buckets, local time


@pytest.fixture(scope="module")
def team(tmp_path_factory: pytest.TempPathFactory, embedder: Embedder):
    ws, frame = make_team(tmp_path_factory.mktemp("team") / "home", embedder, NOW)
    frame["at"] = pd.to_datetime(frame["at"], utc=True)
    yield ws, frame
    ws.close()


@pytest.fixture(scope="module")
def overview(team) -> TeamOverview:
    ws, _ = team
    return team_overview(ws, now=NOW)


def _row(o: TeamOverview, handle: str):
    return next(a for a in o.accounts if a.account == handle)


def test_posts_span_share_and_medians(team, overview: TeamOverview) -> None:
    _, frame = team
    assert overview.n_posts == len(frame)  # every generated post is settled by NOW
    counts = frame["account"].value_counts()
    for handle, (tz, _) in ACCOUNTS.items():
        a = _row(overview, handle)
        mine = frame[frame["account"] == handle]
        assert a.timezone == tz
        assert a.posts == a.settled == counts[handle]
        assert a.share == pytest.approx(counts[handle] / len(frame))
        assert a.first_post == mine["at"].min().to_pydatetime()
        assert a.last_post == mine["at"].max().to_pydatetime()
        assert a.median == pytest.approx(float(np.median(mine["impressions"])))


def test_recent_median_and_trend_match_theil_sen(team, overview: TeamOverview) -> None:
    _, frame = team
    # Weeks from Monday 00:00 UTC; the last three months: this week and the twelve before it.
    week = frame["at"].dt.tz_convert(UTC).dt.normalize()
    week = week - pd.to_timedelta(week.dt.day_of_week, unit="D")
    this_week = pd.Timestamp(NOW).normalize() - pd.Timedelta(days=NOW.weekday())
    start = this_week - pd.Timedelta(weeks=12)
    assert overview.recent_from == start.to_pydatetime()
    recent = frame[week >= start].assign(week=week[week >= start])
    for handle in ACCOUNTS:
        a = _row(overview, handle)
        mine = recent[recent["account"] == handle]
        assert a.recent_posts == len(mine)
        assert a.recent_median == pytest.approx(float(np.median(mine["impressions"])))
        weekly = mine.groupby("week")["impressions"].median()
        x = ((weekly.index - start) / pd.Timedelta(weeks=1)).to_numpy(float)
        # Source: scipy.stats.theilslopes (Theil 1950; Sen 1968) on log weekly medians.
        slope, _, low, high = theilslopes(np.log(weekly.to_numpy()), x, alpha=0.95)
        assert a.trend is not None and a.trend.periods == len(weekly)
        assert a.trend.slope == pytest.approx(slope, abs=1e-12)
        assert a.trend.slope_low == pytest.approx(low, abs=1e-12)
        assert a.trend.slope_high == pytest.approx(high, abs=1e-12)
        assert a.trend.clear == (low > 0 or high < 0)


def test_best_hours_are_the_highest_local_hour_bucket(team, overview: TeamOverview) -> None:
    _, frame = team
    at_peak = 0
    for handle, (tz, _) in ACCOUNTS.items():
        mine = frame[frame["account"] == handle]
        # Local hours by the IANA zone rules (zoneinfo), bucketed as the segments' hour split.
        local = np.array([t.astimezone(ZoneInfo(tz)).hour for t in mine["at"]])
        bucket = np.searchsorted(EDGES, local, side="right") - 1
        values = mine["impressions"].to_numpy()
        stats = pd.DataFrame({"b": bucket, "v": values}).groupby("b")["v"].agg(["median", "size"])
        enough = stats[stats["size"] >= DEFAULT_MIN_POSTS]
        best = int(enough["median"].idxmax())
        h = _row(overview, handle).best_hours
        assert h is not None
        assert h.hours == f"{EDGES[best]:02d}–{EDGES[best + 1]:02d}"
        assert h.median == pytest.approx(enough["median"].max())
        assert h.rest_median == pytest.approx(float(np.median(values[bucket != best])))
        # Mann–Whitney U of each bucket against the rest (scipy), Holm across the buckets
        # (statsmodels' multipletests).
        order = sorted(set(bucket))
        ps = [mannwhitneyu(values[bucket == b], values[bucket != b]).pvalue for b in order]
        holm = multipletests(ps, method="holm")[1]
        assert h.p_holm == pytest.approx(holm[order.index(best)], rel=1e-9)
        at_peak += h.hours in ("09–12", "12–15", "15–18")
    # The generator's hour effect peaks at 13:00 local time in each account's own zone (the
    # three buckets around it are within 15% of the peak; midnight is half of it).
    assert at_peak == len(ACCOUNTS)


def test_better_topics_against_each_accounts_usual_level(team, overview: TeamOverview) -> None:
    ws, frame = team
    # The same clusters as the topics answer (same posts, same seed).
    found = topics(ws, now=NOW)
    assert overview.topics == [t.name for t in found.topics]
    topic_of = {pid: t.name for t in found.topics for pid in t.post_ids}
    f = frame.assign(topic=frame["post_id"].map(topic_of))
    f["ratio"] = f["impressions"] / f.groupby("account")["impressions"].transform("median")
    listed = 0
    for handle in ACCOUNTS:
        rows = []
        for name in overview.topics:
            own = f[(f["account"] == handle) & (f["topic"] == name)]["ratio"].to_numpy()
            rest = f[(f["account"] != handle) & (f["topic"] == name)]["ratio"].to_numpy()
            if len(own) >= DEFAULT_MIN_POSTS and len(rest) >= DEFAULT_MIN_POSTS:
                rows.append((name, own, rest, mannwhitneyu(own, rest).pvalue))
        holm = multipletests([p for *_, p in rows], method="holm")[1] if rows else []
        want = {
            name: (np.median(own), np.median(rest), q)
            for (name, own, rest, _), q in zip(rows, holm, strict=True)
            if np.median(own) > np.median(rest)
        }
        got = _row(overview, handle).better_topics
        assert {t.topic for t in got} == set(want)
        for t in got:
            lift, team_lift, q = want[t.topic]
            assert (t.lift, t.team_lift) == (pytest.approx(lift), pytest.approx(team_lift))
            assert t.p_holm == pytest.approx(q, rel=1e-9)
            assert t.clear == (q < 0.05)
        ratios = [t.lift / t.team_lift for t in got]
        assert ratios == sorted(ratios, reverse=True)
        listed += len(got)
    assert listed > 0  # some topic is read, so the comparison above is not vacuous


def test_cli_and_api_give_the_same_overview(
    team, monkeypatch: pytest.MonkeyPatch, embedder: Embedder
) -> None:
    ws, _ = team
    use_embedder(embedder)
    monkeypatch.setenv("SOUNDING_HOME", str(ws.settings.home))
    monkeypatch.setenv("SOUNDING_NOW", NOW.isoformat())
    runner = CliRunner()
    got = runner.invoke(app, ["accounts", "--details", "--json"])
    assert got.exit_code == 0, got.output
    cli = json.loads(got.output)
    api = TestClient(create_app(workspace=ws)).get("/v1/team")
    assert api.status_code == 200, api.text
    assert api.json() == cli
    assert cli["accounts"][0]["trend"]["slope"] is not None  # statistical names in --json
    screen = runner.invoke(app, ["accounts", "--details"])
    assert screen.exit_code == 0, screen.output
    for word in ("best hours", "last three months", "association, not a cause"):
        assert word in " ".join(screen.output.split())
    for name in ("Theil", "Mann", "Holm", "p_holm", "slope"):
        assert name not in screen.output
    bad = TestClient(create_app(workspace=ws)).get("/v1/team", params={"metric": "nonsense"})
    assert bad.status_code == 422 and "error" in bad.json()
    # The command line reads the same clock: its window starts on the Monday twelve weeks
    # before this week's, as the library's does (checked above).
    monday = pd.Timestamp(NOW).normalize() - pd.Timedelta(days=NOW.weekday()) - pd.Timedelta(weeks=12)
    assert pd.Timestamp(cli["recent_from"]) == monday


def test_an_account_that_usually_gets_none_of_a_metric_has_no_ratio() -> None:
    from service.analysis.team import _better_topics, ratios_to_usual

    # Account a's median is 0 (most posts got no clicks); b's is 4.
    values = np.array([0.0, 0.0, 0.0, 3.0, 2.0, 4.0, 6.0])
    accounts = np.array(["a", "a", "a", "a", "b", "b", "b"], dtype=object)
    got = ratios_to_usual(values, accounts)
    assert np.isnan(got[:4]).all()
    assert got[4:] == pytest.approx([0.5, 1.0, 1.5])
    # The rest of the team's median ratio on a topic can be 0: the topic is
    # still listed, first, and nothing divides by zero.
    ratio = np.array([2.0, 3.0, 0.0, 0.0, 1.5, 1.4, 1.0, 1.0, np.nan])
    topic = np.array(["x", "x", "x", "x", "y", "y", "y", "y", "y"], dtype=object)
    mine = np.array([True, True, False, False, True, True, False, False, True])
    out = _better_topics(ratio, topic, mine, ["x", "y"], 2)
    assert [t.topic for t in out] == ["x", "y"]
    assert out[0].team_lift == 0.0 and out[1].n == 2  # the NaN ratio is left out
