"""Who should post it: a draft forecast for each account, ranked, on a
generated history whose account levels, hour effect and zones are known."""

from __future__ import annotations

import json
import math
from datetime import datetime, timedelta
from zoneinfo import ZoneInfo

import httpx
import numpy as np
import pytest
from conftest import NOW
from fastapi.testclient import TestClient
from scipy.stats import spearmanr
from support.team_history import ACCOUNTS, ACTIONS, SUBJECTS, make_team, true_reach
from typer.testing import CliRunner

from models.embedding import Embedder
from service.account_choice import choose_account
from service.api.app import create_app
from service.cli import app
from service.cli.base import use_embedder


@pytest.fixture(scope="module")
def team(tmp_path_factory: pytest.TempPathFactory, embedder: Embedder):
    ws, frame = make_team(tmp_path_factory.mktemp("team") / "home", embedder, NOW)
    yield ws, frame
    ws.close()


def _drafts() -> list[tuple[str, str, datetime]]:
    rng = np.random.default_rng(7)
    out = []
    for i in range(20):
        subject = SUBJECTS[i % len(SUBJECTS)]
        # Planned times spread over the UTC day, so each account's local hour differs.
        at = NOW + timedelta(days=1 + i % 3, hours=float(rng.uniform(0, 24)))
        out.append((f"{subject} {ACTIONS[i % len(ACTIONS)]} this week", subject, at))
    return out


def heavily_overlapping(a: tuple[float, float], b: tuple[float, float]) -> bool:
    """The overlap rule as service/review/overlap.py states it, written out
    again: intervals overlap by at least half the narrower one's width."""
    inter = min(a[1], b[1]) - max(a[0], b[0])
    return inter >= 0.5 * min(a[1] - a[0], b[1] - b[0])


def test_ranking_follows_the_true_reach_and_ties_follow_the_rule(team) -> None:
    ws, _ = team
    correlations, tied, apart = [], 0, 0
    for text, subject, at in _drafts():
        c = choose_account(ws, text, accounts="all", planned_at=at, now=NOW)
        assert [r.rank for r in c.accounts] == list(range(1, len(ACCOUNTS) + 1))
        assert {r.account for r in c.accounts} == set(ACCOUNTS)
        truth = [true_reach(r.account, subject, at) for r in c.accounts]
        # Spearman's rank correlation (scipy.stats.spearmanr) of the forecast
        # medians with the generator's expected reach, across the accounts.
        correlations.append(spearmanr([r.median for r in c.accounts], truth).statistic)
        bands = [(r.log1p_low, r.log1p_high) for r in c.accounts]
        best = int(np.argmax([r.log1p_median for r in c.accounts]))
        for i, r in enumerate(c.accounts):
            assert r.tied_with_best == heavily_overlapping(bands[best], bands[i])
            others = [
                o.account
                for j, o in enumerate(c.accounts)
                if j != i and heavily_overlapping(bands[i], bands[j])
            ]
            assert r.tied_with == others
            # The log band is the metric's band (rounded to 0.1 on the metric's scale).
            assert math.expm1(r.log1p_median) == pytest.approx(r.median, rel=1e-3, abs=0.1)
        tied += sum(r.tied_with_best for r in c.accounts) - 1
        apart += sum(not r.tied_with_best for r in c.accounts)
        assert c.told_apart == (sum(r.tied_with_best for r in c.accounts) == 1)
    print("mean Spearman over 20 drafts:", float(np.mean(correlations)), "ties:", tied, "apart:", apart)
    assert float(np.mean(correlations)) >= 0.8, correlations
    # Both verdicts occur, so the tie check above is not vacuous.
    assert tied > 0 and apart > 0


def test_each_account_is_forecast_in_its_own_zone_and_not_recorded(team) -> None:
    ws, _ = team
    before = len(ws.store.track.given("impressions"))
    c = choose_account(ws, "The seed library opens early this week", planned_at="2026-12-03T12:00", now=NOW)
    for r in c.accounts:
        tz = ACCOUNTS[r.account][0]
        # Source: the IANA zone rules through zoneinfo: noon local in each zone.
        expected = datetime(2026, 12, 3, 12, 0, tzinfo=ZoneInfo(tz))
        assert r.planned_at == expected
        assert r.local_time == expected.isoformat(timespec="minutes")
        assert r.timezone == tz
    assert len({r.planned_at for r in c.accounts}) == len(ACCOUNTS)  # five different instants
    assert c.recorded is False
    assert len(ws.store.track.given("impressions")) == before


def test_own_precedents_are_counted_against_the_usual_level(team) -> None:
    ws, frame = team
    c = choose_account(
        ws, "Magnolias are in full colour this week", planned_at=NOW + timedelta(days=1), now=NOW
    )
    settled = frame[frame["at"] <= NOW - timedelta(hours=ws.settings.maturity_hours)].sort_values("at")
    by_id = frame.set_index("post_id")
    seen = 0
    for r in c.accounts:
        # The usual level: the median of the account's last 20 settled posts
        # (pandas here, on the generated frame; the account-baseline feature).
        last = settled[settled["account"] == r.account].tail(20)["impressions"]
        usual = float(np.expm1(np.median(np.log1p(last))))
        assert r.usual == pytest.approx(usual, rel=1e-3)
        assert len(r.precedents) == r.own_precedents
        assert all(by_id.loc[p, "account"] == r.account for p in r.precedents)
        above = int(sum(by_id.loc[p, "impressions"] > usual for p in r.precedents))
        assert r.above_usual == above
        seen += r.own_precedents
        if r.own_precedents and above == r.own_precedents:
            assert "that did well" in r.reason
        if r.own_precedents == 0:
            assert "no similar posts of its own" in r.reason
    assert seen > 0


def test_a_list_of_accounts_and_bad_requests(team) -> None:
    ws, _ = team
    c = choose_account(
        ws, "The fern house gets a new bench", accounts=["Fernside", "ivycourt", "fernside"], now=NOW
    )
    assert sorted(r.account for r in c.accounts) == ["fernside", "ivycourt"]
    from models.errors import InputError, NotFound

    with pytest.raises(NotFound, match="fernsid"):
        choose_account(ws, "x", accounts=["fernsid"], now=NOW)
    with pytest.raises(InputError):
        choose_account(ws, "x", accounts=[" "], now=NOW)


def test_cli_and_api_give_the_same_answer(team, monkeypatch: pytest.MonkeyPatch, embedder: Embedder) -> None:
    ws, _ = team
    at = "2026-12-04T09:30"
    use_embedder(embedder)
    monkeypatch.setenv("SOUNDING_HOME", str(ws.settings.home))
    monkeypatch.setenv("SOUNDING_NOW", NOW.isoformat())
    runner = CliRunner()
    text = "The rose arbour hosts a talk this week"
    got = runner.invoke(
        app,
        ["check", text, "--accounts", "fernside,mossbank", "--accounts", "reedmere", "--at", at, "--json"],
    )
    assert got.exit_code == 0, got.output
    cli = json.loads(got.output)
    client = TestClient(create_app(workspace=ws))
    api = client.post(
        "/v1/account-choices",
        json={"text": text, "accounts": ["fernside", "mossbank", "reedmere"], "planned_at": at},
    )
    assert api.status_code == 200, api.text
    assert api.json() == cli
    assert [r["rank"] for r in cli["accounts"]] == [1, 2, 3]
    # --at read as check reads it: another layout, day first, still in each account's zone.
    other = ["check", text, "--accounts", "fernside,mossbank,reedmere", "--at", "04/12/2026 09:30"]
    layout = runner.invoke(app, [*other, "--day-first", "--json"])
    assert layout.exit_code == 0, layout.output
    assert json.loads(layout.output) == cli
    assert cli["recorded"] is False
    screen = runner.invoke(app, ["check", text, "--accounts", "all", "--at", at])
    assert screen.exit_code == 0, screen.output
    assert "accounts, best first" in screen.output and "what sets each apart" in screen.output
    assert "log1p" not in screen.output  # statistical names only with --details
    assert "log1p" in runner.invoke(app, ["check", text, "--accounts", "all", "--at", at, "--details"]).output
    odd = client.post("/v1/account-choices", json={"text": text, "metric": "nonsense"})
    assert odd.status_code == 422 and odd.json()["error"]["field"] == "metric"
    bad = client.post("/v1/account-choices", json={"text": text, "accounts": ["nobody"]})
    assert bad.status_code == 404 and bad.json()["error"]["field"] == "account"
    both = runner.invoke(app, ["check", text, "--accounts", "all", "--account", "fernside"])
    assert both.exit_code == 1 and "not both" in both.output


def test_the_client_reads_the_account_choice_and_the_team(team, monkeypatch: pytest.MonkeyPatch) -> None:
    """service.client gives the API's answers, as the API's own models."""
    from support.serving import serve

    from service.client import SoundingClient

    ws, _ = team
    monkeypatch.setenv("SOUNDING_NOW", NOW.isoformat())
    text, at = "The lake path gets a new bench this week", "2026-12-03T08:00"
    with serve(create_app(workspace=ws)) as base, SoundingClient(base_url=base, timeout=120) as client:
        choice = client.choose_account(text, planned_at=at)
        overview = client.team()
        with httpx.Client(base_url=base, timeout=120) as http:
            want = http.post("/v1/account-choices", json={"text": text, "planned_at": at}).json()
            assert overview.model_dump(mode="json") == http.get("/v1/team").json()
    assert choice.model_dump(mode="json") == want
    assert {a.account for a in overview.accounts} == set(ACCOUNTS)


def test_an_account_with_too_little_history_is_left_out(team) -> None:
    from models.errors import NotReady
    from service.forecast.draft import Draft

    ws, _ = team
    ws.store.set_account("newcomer", timezone="Pacific/Auckland")  # no posts yet
    least = ws.settings.min_history_posts
    c = choose_account(ws, "The herb garden opens early this week", now=NOW)
    assert {r.account for r in c.accounts} == set(ACCOUNTS)
    assert c.left_out == [f"newcomer: 0 posts with impressions; a forecast needs at least {least}"]
    # The same rule as a single forecast's (the forecaster's own refusal).
    with pytest.raises(NotReady, match=f"a forecast needs at least {least}"):
        ws.forecaster.forecast([Draft(text="x y z", account="newcomer")], now=NOW)
    with pytest.raises(NotReady, match="no account has"):
        choose_account(ws, "The herb garden opens early", accounts=["newcomer"], now=NOW)
