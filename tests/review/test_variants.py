"""Variants: phrasings of one draft forecast side by side, ranked by median,
with the precedents each has that the others do not."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from fastapi.testclient import TestClient
from typer.testing import CliRunner

from service.api.app import create_app
from service.forecast.answer import CAUTION

ROOT = Path(__file__).resolve().parents[2]
EFFECTS = json.loads((ROOT / "demo_data" / "effects.json").read_text(encoding="utf-8"))
# A time inside the demo history, so "now" does not move the features between calls.
AT = "2026-10-14T12:30:00"
BLOOMS = (
    "The dahlias in the Walled Garden are at their peak this week 🌸 The colour glows in "
    "low sun. #WhatsFlowering"
)
SHOP = "Shop news: enamel mugs are back in stock, 10% off for members until Sunday. Ask at the till."
BLOOMS_AGAIN = (
    "The dahlias in the Walled Garden are at their peak this week 🌼 The colour glows "
    "in low sun. #WhatsFlowering"
)


@pytest.fixture(scope="module")
def client(demo_workspace) -> TestClient:
    return TestClient(create_app(workspace=demo_workspace))


def test_variants_rank_by_topic_effect_and_match_single_forecasts(client: TestClient) -> None:
    r = client.post("/v1/variants", json={"texts": [SHOP, BLOOMS], "account": "loomhaven", "planned_at": AT})
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["caution"] == CAUTION and body["rule"]
    # Source: demo_data/effects.json topic_effect: blooms +0.40, shop_membership -0.40.
    order = EFFECTS["topic_order_strongest_first"]
    assert order.index("blooms") < order.index("shop_membership")
    assert [v["index"] for v in body["variants"]] == [2, 1]
    assert [v["rank"] for v in body["variants"]] == [1, 2]
    # Each variant equals its own forecast, asked for separately.
    single = {}
    for i, text in ((1, SHOP), (2, BLOOMS)):
        f = client.post("/v1/forecasts", json={"text": text, "account": "loomhaven", "planned_at": AT})
        assert f.status_code == 200, f.text
        single[i] = f.json()
    for v in body["variants"]:
        f = single[v["index"]]
        assert (v["low"], v["median"], v["high"]) == (f["low"], f["median"], f["high"])
        ids = [p["post_id"] for p in f["precedents"]]
        assert v["precedents"] == ids
        others = {p["post_id"] for j, g in single.items() if j != v["index"] for p in g["precedents"]}
        # Plain set difference (common practice, no source), in the variant's order.
        assert v["only_here"] == [p for p in ids if p not in others]
    assert body["variants"][0]["only_here"]  # different topics, different precedents


def test_near_identical_variants_cannot_be_told_apart(client: TestClient) -> None:
    r = client.post(
        "/v1/variants", json={"texts": [BLOOMS, BLOOMS_AGAIN], "account": "loomhaven", "planned_at": AT}
    )
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["told_apart"] is False
    assert all(v["tied_with_best"] for v in body["variants"])
    assert "cannot be told apart" in body["summary"]


@pytest.mark.parametrize(
    ("texts", "status", "needle"),
    [
        ([BLOOMS], 422, "texts"),
        ([BLOOMS, "   "], 422, "the draft text is empty"),
        ([BLOOMS] * 11, 413, "11 versions; the limit is 10"),
        ([BLOOMS, "x" * 6000], 413, "the limit is"),
    ],
)
def test_variant_errors(client: TestClient, texts: list[str], status: int, needle: str) -> None:
    r = client.post("/v1/variants", json={"texts": texts, "account": "loomhaven"})
    assert r.status_code == status, r.text
    err = r.json()["error"]
    assert needle in err["message"]
    if "empty" in needle:
        assert err["where"] == "version 2"


def test_unknown_account(client: TestClient) -> None:
    r = client.post("/v1/variants", json={"texts": [BLOOMS, SHOP], "account": "nobody"})
    assert r.status_code == 404 and "nobody" in r.json()["error"]["message"]


def test_cli_compare(demo_home, embedder, monkeypatch) -> None:
    from service.cli import app
    from service.cli.base import use_embedder

    use_embedder(embedder)
    monkeypatch.setenv("SOUNDING_HOME", str(demo_home))
    runner = CliRunner()
    res = runner.invoke(app, ["compare", "--account", "loomhaven", "--at", AT, SHOP, BLOOMS, "--json"])
    assert res.exit_code == 0, res.output
    body = json.loads(res.stdout)
    assert [v["index"] for v in body["variants"]] == [2, 1]
    res = runner.invoke(app, ["compare", "--account", "loomhaven", SHOP])
    assert res.exit_code == 1 and "at least two" in res.output
    res = runner.invoke(app, ["compare", "--account", "loomhaven", "--at", AT, SHOP, BLOOMS])
    assert res.exit_code == 0, res.output
    # The table shows each variant's median and how many precedents only it has.
    for v in body["variants"]:
        assert f"{v['median']:,.0f}" in res.output
    assert "own precedents" in res.output
    assert "not a certainty" in res.output
