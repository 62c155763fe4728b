"""Staleness warnings, `train --if-stale`, pseudo-outcomes and the SOUNDING_NOW clock.

Sources: the binomial band is recounted from the binomial pmf with math.comb
(the code uses scipy.stats.binom); the ACI update is Gibbs & Candès 2021, eq. 2;
RFC 3339 section 5.6 requires the UTC offset that SOUNDING_NOW is refused without.
"""

from __future__ import annotations

import json
import math
from datetime import datetime, timedelta
from pathlib import Path
from typing import ClassVar

import pandas as pd
import pytest
from sqlalchemy import select
from typer.testing import CliRunner

from models.embedding import Embedder
from models.errors import TimeParseError
from service.cli import app
from service.cli.base import use_embedder
from service.clock import UTC, now_utc, to_naive_utc
from service.forecast.training import train
from service.ingest.options import ImportOptions
from service.storage.tables import Account, CalibrationState, ForecastGiven, ForecastMatch, Post
from service.track import adaptation, facts
from service.workspace import Workspace

ROOT = Path(__file__).resolve().parents[2]
runner = CliRunner()


def run(*args: str):
    res = runner.invoke(app, list(args))
    assert res.exit_code == 0, res.output
    return res


def test_sounding_now_fixes_the_clock(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("SOUNDING_NOW", "2026-03-29T01:30:00+01:00")
    assert now_utc() == datetime(2026, 3, 29, 0, 30, tzinfo=UTC)  # RFC 3339 offset arithmetic
    monkeypatch.setenv("SOUNDING_NOW", "2026-03-29T01:30:00")  # no offset: not RFC 3339
    with pytest.raises(TimeParseError):
        now_utc()
    monkeypatch.delenv("SOUNDING_NOW")
    # Without the setting, "now" is the system clock: it falls between two readings of it.
    before = datetime.now(UTC)
    got = now_utc()
    assert before <= got <= datetime.now(UTC)


def test_old_model_warns_pseudo_outcomes_adapt_and_train_if_stale(
    demo_copy: Workspace, embedder: Embedder, monkeypatch: pytest.MonkeyPatch
) -> None:
    ws = demo_copy
    use_embedder(embedder)
    monkeypatch.setenv("SOUNDING_HOME", str(ws.settings.resolved_home))
    monkeypatch.setenv("SOUNDING_NOW", "2026-09-01T00:00:00Z")
    train(ws, "impressions", backtest=False)  # a model that knows nothing after August
    monkeypatch.setenv("SOUNDING_NOW", "2026-11-04T00:00:00Z")

    # Hand count from posts.csv: posts settled (48 h) after the model's data and by now.
    hist = pd.read_csv(ROOT / "demo_data" / "posts.csv")
    t = pd.to_datetime(hist["posted_at"], utc=True)
    lag = pd.Timedelta(hours=48)
    fresh = int(
        ((t > pd.Timestamp("2026-09-01T00:00Z") - lag) & (t <= pd.Timestamp("2026-11-04T00:00Z") - lag)).sum()
    )
    assert fresh >= ws.settings.stale_after_posts  # the demo has enough for the warning

    why = facts.staleness(ws, "impressions")
    assert why["stale"] and why["newly_settled"] == fresh
    assert any(f"{fresh} posts have settled" in w for w in why["warnings"])

    # Pseudo-outcomes: every newly settled post, forecast as it would have been.
    adaptation.adapt(ws, "impressions")
    with ws.store.session() as s:
        state = s.get(CalibrationState, ("impressions", "0.8"))
        alpha_t, n = state.alpha_t, state.pseudo_updates
    assert n == fresh
    gamma = ws.settings.adaptive_gamma
    # Gibbs & Candès eq. 2, floored at the stated level while no real outcome
    # exists (pseudo-outcomes never widen): after the last time the floor was
    # hit, j steps with m misses give alpha_t = alpha + gamma * (j * alpha - m),
    # so (alpha_t - alpha) / gamma is a multiple of alpha = 1/5, and >= 0.
    steps = (alpha_t - 0.2) / gamma
    assert steps >= -1e-9
    assert 5 * steps == pytest.approx(round(5 * steps), abs=1e-6) and round(5 * steps) <= n

    ans = json.loads(
        run("check", "Autumn colour in the arboretum this week", "--account", "loomhaven", "--json").output
    )
    assert ans["calibration"]["method"] == "cqr+aci"
    assert ans["calibration"]["pseudo_outcomes"] == fresh
    assert ans["calibration"]["widening_held"] is False  # alpha_t >= alpha: nothing to hold back
    assert "settled posts forecast afterwards" in ans["calibration"]["reason"]
    shown = run(
        "check",
        "Autumn colour in the arboretum this week",
        "--account",
        "loomhaven",
        "--details",
        "--no-record",
    ).output
    assert f"adaptive level (alpha_t) {alpha_t:.3f}" in shown and f"{fresh} pseudo-outcomes" in shown
    assert "why: " in shown
    assert any("posts have settled" in w for w in ans["warnings"])

    assert "stale:" in run("train", "--if-stale", "--skip-backtest").output
    assert "not stale" in run("train", "--if-stale", "--skip-backtest").output
    with ws.store.session() as s:  # retraining kept what the adaptation learnt
        assert s.get(CalibrationState, ("impressions", "0.8")).alpha_t == alpha_t
    run("track-record", "--reset-adaptation")
    with ws.store.session() as s:
        assert s.scalars(select(CalibrationState)).first() is None


class _Model:
    """Stands in for a fresh model: only its report's data time is read."""

    report: ClassVar[dict[str, str]] = {"data_as_of": "2026-06-30T00:00:00+00:00"}


def _band(n: int, p: float) -> tuple[int, int]:
    """Central 95% of Binomial(n, p), by summing the pmf (math.comb)."""
    cdf, lo, hi = 0.0, None, None
    for k in range(n + 1):
        cdf += math.comb(n, k) * p**k * (1 - p) ** (n - k)
        if lo is None and cdf >= 0.025:
            lo = k
        if hi is None and cdf >= 0.975:
            hi = k
    return int(lo), int(hi)


@pytest.mark.parametrize("offset", [-1, 0])
def test_live_coverage_outside_its_binomial_band_warns(
    workspace: Workspace, tmp_path: Path, offset: int
) -> None:
    base = datetime(2026, 6, 1, 12, tzinfo=UTC)
    lines = ["post_id,account,text,posted_at,impressions"]
    lines += [
        f"p{i},garden,Post number {i} about the garden,{(base + timedelta(hours=i)).isoformat()},{100 + i}"
        for i in range(50)
    ]
    (tmp_path / "posts.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    workspace.import_csv(tmp_path / "posts.csv", ImportOptions(new_accounts="UTC"))
    low, _ = _band(50, 0.8)
    held = low + offset
    with workspace.store.session() as s:
        aid = s.scalar(select(Account.id))
        pks = list(s.scalars(select(Post.id).order_by(Post.posted_at)))
        for i, pk in enumerate(pks):
            f = ForecastGiven(
                given_at=to_naive_utc(base - timedelta(days=1)),
                source="check",
                account_id=aid,
                text="t",
                text_hash="h",
                planned_at=to_naive_utc(base),
                metric="impressions",
                coverage=0.8,
                low=1,
                median=2,
                high=3,
                low_log=0.1,
                median_log=0.2,
                high_log=0.3,
                model_version="v",
                calibration="cqr",
                alpha_t=0.2,
                precedents="[]",
            )
            s.add(f)
            s.flush()
            s.add(
                ForecastMatch(
                    forecast_id=f.id,
                    post_pk=pk,
                    metric="impressions",
                    how="text_time",
                    matched_at=to_naive_utc(base),
                    outcome=1.0,
                    outcome_log=0.5,
                    inside=i < held,
                    adapted=True,
                )
            )
    why = facts.staleness(
        workspace,
        "impressions",
        0.8,
        model=_Model(),  # type: ignore[arg-type]
        now=datetime(2026, 7, 1, tzinfo=UTC),
    )
    warned = any("of the last 50 scored forecasts" in w for w in why["warnings"])
    assert warned == (offset < 0)
