"""The track record end to end on the demo: forecast the demo's plan file, import
those drafts as published posts (demo_data/plan_published.csv, made by
demo_data/generate.py from the history's own model), see them matched, scored
and reported, and check the report against a hand count from the two files.

Sources: the Wilson interval is checked against scipy's
``binomtest(...).proportion_ci(method="wilson")`` (the report uses statsmodels);
the account trailing median baseline is recounted with pandas from posts.csv.
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import pandas as pd
import pytest
from fastapi.testclient import TestClient
from scipy.stats import binomtest
from sqlalchemy import delete
from support.serving import CHROMIUM, CHROMIUM_ARGS, serve
from typer.testing import CliRunner

from models.embedding import Embedder
from service.api.app import create_app
from service.cli import app
from service.cli.base import use_embedder
from service.settings import Settings
from service.storage.tables import ForecastGiven
from service.workspace import Workspace

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "demo_data"
PLAN = DEMO / "plan.csv"
PUBLISHED = DEMO / "plan_published.csv"
GIVEN_AT = "2026-12-01T09:00:00Z"
LATER = "2027-01-15T00:00:00Z"
runner = CliRunner()


def run(*args: str):
    res = runner.invoke(app, list(args))
    assert res.exit_code == 0, res.output
    return res


@pytest.fixture()
def home(demo_copy: Workspace, embedder: Embedder, monkeypatch: pytest.MonkeyPatch) -> Path:
    use_embedder(embedder)
    # Other tests forecast through the shared demo directory (and so record there);
    # this copy starts with an empty track record, so every count below is its own.
    with demo_copy.store.session() as s:
        s.execute(delete(ForecastGiven))
    path = demo_copy.settings.resolved_home
    monkeypatch.setenv("SOUNDING_HOME", str(path))
    return path


def _read(path: Path) -> list[dict[str, str]]:
    with path.open(encoding="utf-8", newline="") as f:
        return list(csv.DictReader(f))


def test_plan_forecast_published_matched_scored_reported(
    home: Path, tmp_path: Path, embedder: Embedder, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("SOUNDING_NOW", GIVEN_AT)
    out = tmp_path / "forecasts.csv"
    run("check", "--plan", str(PLAN), "--out", str(out))
    # An exploratory check that opts out is not kept.
    run("check", "Trying a wording", "--account", "loomhaven", "--no-record")

    monkeypatch.setenv("SOUNDING_NOW", LATER)  # every published post is settled by now
    run("import", str(PUBLISHED))
    rep = json.loads(run("track-record", "--json").output)

    # Hand count from the two files: the i-th published post is the i-th plan row
    # (the generator's rule; the 8th draft was never published).
    forecasts = {r["draft_id"]: r for r in _read(out)}
    plan = _read(PLAN)
    published = _read(PUBLISHED)
    pairs = [(forecasts[plan[i]["draft_id"]], float(p["impressions"])) for i, p in enumerate(published)]
    held = sum(float(f["low"]) <= y <= float(f["high"]) for f, y in pairs)
    mae = sum(abs(math.log1p(float(f["median"])) - math.log1p(y)) for f, y in pairs) / len(pairs)

    o = rep["overall"]
    assert (o["given"], o["matched"], o["settled"]) == (8, 7, 7)
    assert o["stated_coverage"] == pytest.approx(0.8)
    assert o["live_coverage"] == pytest.approx(held / 7)
    assert o["mae_log"] == pytest.approx(mae, abs=1e-3)  # CSV medians are rounded to 0.1
    ci = binomtest(held, 7).proportion_ci(confidence_level=0.95, method="wilson")  # scipy
    assert o["live_coverage_ci"] == pytest.approx([ci.low, ci.high], abs=1e-9)
    assert [m["month"] for m in rep["months"]] == ["2026-12"]
    assert rep["months"][0]["settled"] == 7

    # Account trailing median as it stood when the forecasts were given: the last 20
    # posts of the account settled (48 h) by then, recounted from posts.csv.
    hist = pd.read_csv(DEMO / "posts.csv")
    hist["t"] = pd.to_datetime(hist["posted_at"], utc=True)
    cutoff = pd.Timestamp(GIVEN_AT) - pd.Timedelta(hours=48)
    errs = []
    for i, p in enumerate(published):
        acc = hist[(hist["account"] == plan[i]["account"]) & (hist["t"] <= cutoff)]
        base = float(acc.sort_values("t")["impressions"].tail(20).map(math.log1p).median())
        errs.append(abs(base - math.log1p(float(p["impressions"]))))
    assert o["baselines"]["account_median"]["mae_log"] == pytest.approx(sum(errs) / 7, abs=1e-9)

    worst = rep["worst"]
    assert len(worst) == 5 and worst[0]["error_log"] >= worst[-1]["error_log"]
    assert all(w["precedents"] for w in worst)
    assert {r["draft_id"] for r in worst} <= {r["draft_id"] for r in plan[:7]}

    # The next forecast states its calibration and the live coverage so far.
    ans = json.loads(
        run("check", plan[7]["text"], "--account", plan[7]["account"], "--json", "--no-record").output
    )
    assert ans["calibration"]["method"] == "cqr+aci"
    assert ans["calibration"]["outcomes"] == 7
    assert ans["live_coverage"]["scored"] == 7 and ans["live_coverage"]["held"] == held
    # Gibbs & Candès 2021: alpha_t moved by gamma * (alpha - err) per outcome.
    gamma = Settings().adaptive_gamma
    assert ans["calibration"]["alpha_t"] == pytest.approx(0.2 + gamma * (7 * 0.2 - (7 - held)))

    # The same report over HTTP, and its figure.
    ws = Workspace(settings=Settings(home=home), embedder=embedder)
    try:
        with TestClient(create_app(workspace=ws)) as client:
            http = client.get("/v1/track-record").json()
            assert http["overall"] == rep["overall"]
            png = client.get("/v1/track-record", params={"format": "png"})
            assert png.headers["content-type"] == "image/png"
            assert png.content[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (RFC 2083)
            assert (
                client.get("/v1/track-record", params={"since": "2027-01-01"}).json()["overall"]["given"] == 0
            )
        if CHROMIUM.exists():  # the page's panel, in headless Chromium (CI installs it)
            _page_panel(ws, held)
    finally:
        ws.close()


def _page_panel(ws: Workspace, held: int) -> None:
    from playwright.sync_api import expect, sync_playwright

    with serve(create_app(workspace=ws)) as base, sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), headless=True, args=CHROMIUM_ARGS)
        try:
            page = browser.new_page()
            page.goto(base + "/")
            expect(page.locator("#track-figures")).to_be_visible(timeout=30_000)
            # The panel rounds the share to whole percent, as the hand count does here.
            expect(page.locator("#track-live")).to_contain_text(f"{round(100 * held / 7)}% of 7")
            expect(page.locator("#track-summary")).to_contain_text("7 settled")
        finally:
            browser.close()
