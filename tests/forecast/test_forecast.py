"""The forecast: leak-free features, calibrated intervals, explanations that
add up, a backtest that beats simple baselines, and recovery of the demo
generator's documented effects."""

from __future__ import annotations

import csv
import json
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest
from fastapi.testclient import TestClient
from sklearn.neighbors import NearestNeighbors

from models import features as F
from models import training_matrix as TM
from models.artefact import TrainedModel, newest, versions
from models.errors import InputError, NotFound, NotReady
from service.api.app import create_app
from service.clock import localize
from service.forecast.draft import Draft
from service.forecast.training import train
from service.history.view import build_view, feature_params
from service.ingest.options import ImportOptions

# These tests run on SQLite, then again on PostgreSQL when a server is set.
pytestmark = pytest.mark.both_backends

ROOT = Path(__file__).resolve().parents[2]
EFFECTS = json.loads((ROOT / "demo_data" / "effects.json").read_text())
NOW = datetime(2026, 12, 1, 12, 0, tzinfo=UTC)


def truth() -> list[dict[str, str]]:
    with (ROOT / "demo_data" / "truth.csv").open(newline="") as f:
        return list(csv.DictReader(f))


@pytest.fixture(scope="module")
def view(demo_workspace):
    return build_view(demo_workspace.store, "impressions", with_vectors=True)


@pytest.fixture(scope="module")
def params(demo_workspace):
    return feature_params(demo_workspace.settings)


def _matrix(v, params):
    return TM.training_matrix(
        v.history, local_hours=v.local_hours, weekdays=v.weekdays, forms=v.forms, params=params
    )


# Leakage --------------------------------------------------------------------


def test_no_leakage_future_metrics_leave_past_features_unchanged(view, params):
    X = _matrix(view, params)
    h = view.history
    T = float(np.quantile(h.time, 0.6))
    rng = np.random.default_rng(0)
    future = h.time >= T
    changed = F.History(
        pk=h.pk,
        time=h.time,
        account=h.account,
        log_target=np.where(future, rng.uniform(0, 15, len(h)), h.log_target),
        vectors=h.vectors,
    )
    X2 = TM.training_matrix(
        changed, local_hours=view.local_hours, weekdays=view.weekdays, forms=view.forms, params=params
    )
    past = h.time < T
    np.testing.assert_array_equal(X[past], X2[past])
    # ...and the change is visible after T, so the check above is not vacuous.
    assert not np.allclose(np.nan_to_num(X[~past]), np.nan_to_num(X2[~past]))


def test_a_posts_own_metric_never_enters_its_features(view, params):
    h = view.history
    i = len(h) // 2
    X = _matrix(view, params)
    logs = h.log_target.copy()
    logs[i] += 5.0
    X2 = TM.training_matrix(
        F.History(h.pk, h.time, h.account, logs, h.vectors),
        local_hours=view.local_hours,
        weekdays=view.weekdays,
        forms=view.forms,
        params=params,
    )
    np.testing.assert_array_equal(X[i], X2[i])


def test_neighbour_features_match_exact_search(view, params):
    """team_median and top_sim against scikit-learn's exact cosine neighbours
    over the posts mature at each post's time (source: scikit-learn
    NearestNeighbors, brute force)."""
    X = _matrix(view, params)
    h = view.history
    col = {n: j for j, n in enumerate(F.FEATURE_NAMES)}
    rng = np.random.default_rng(1)
    for i in rng.choice(np.arange(len(h) // 3, len(h)), size=25, replace=False):
        ok = np.flatnonzero(F.eligible(h, h.time[i], params))
        nn = NearestNeighbors(n_neighbors=params.k, metric="cosine", algorithm="brute")
        nn.fit(h.vectors[ok])
        dist, idx = nn.kneighbors(h.vectors[i : i + 1])
        rows = ok[idx[0]]
        assert X[i, col["team_median"]] == pytest.approx(np.median(h.log_target[rows]), abs=1e-9)
        assert X[i, col["team_top_sim"]] == pytest.approx(1 - dist[0, 0], abs=1e-5)


# Training artefacts -----------------------------------------------------------


def test_trained_model_is_a_versioned_artefact_with_report(demo_workspace):
    root = demo_workspace.settings.models_dir
    version = newest(root, "impressions")
    m = TrainedModel.load(root / "impressions" / version)
    assert m.metric == "impressions"
    assert set(m.report["backtest"]["coverage_by_level"]) == {"0.5", "0.7", "0.8", "0.9", "0.95"}
    assert m.report["n_train"] + m.report["n_calibration"] == m.report["n_posts"]
    # The calibration block comes later in time than the training block: the
    # report's block bounds, checked against the posts' own times in the store.
    until = datetime.fromisoformat(m.report["train_until"])
    start = datetime.fromisoformat(m.report["calibration_from"])
    assert until <= start
    frame = demo_workspace.store.posts_frame()
    as_of = datetime.fromisoformat(m.report["data_as_of"])
    mature = frame[
        (frame["posted_at"] <= as_of - timedelta(hours=demo_workspace.settings.maturity_hours))
        & frame["impressions"].notna()
    ]
    assert len(mature) == m.report["n_posts"]
    assert (mature["posted_at"] <= until).sum() >= m.report["n_train"]
    assert (mature["posted_at"] < start).sum() <= m.report["n_train"]
    assert (mature["posted_at"] >= start).sum() >= m.report["n_calibration"]


def test_service_swaps_to_a_newer_model_whole(demo_copy):
    ws = demo_copy
    first = ws.forecaster.model("impressions").version
    m = train(ws, "impressions", backtest=False, now=NOW)
    assert versions(ws.settings.models_dir, "impressions")[-1] == m.version != first
    f = ws.forecaster.forecast(
        [Draft(text="Magnolias are out in the Long Border", account="loomhaven")], now=NOW
    )[0]
    assert f.model_version == m.version
    # No backtest in that version: the forecast says so rather than invent one.
    assert f.backtested_coverage is None
    # A half-written version (no config yet) is never picked up.
    (ws.settings.models_dir / "impressions" / "99999999T999999999Z" / "quantiles").mkdir(parents=True)
    assert ws.forecaster.model("impressions").version == m.version


# Backtest on the demo -------------------------------------------------------


def test_backtest_beats_every_baseline_and_holds_coverage(demo_workspace):
    m = demo_workspace.forecaster.model("impressions")
    bt = m.report["backtest"]
    model = bt["model"]
    for name, base in bt["baselines"].items():
        assert model["mae_log"] < base["mae_log"], name
        assert model["spearman"] > base["spearman"], name
    # Within 5 points of nominal (the bound; CQR's guarantee is for
    # exchangeable data, and time order is only close to that).
    assert abs(model["coverage"] - bt["coverage_nominal"]) <= 0.05
    for level, got in bt["coverage_by_level"].items():
        assert abs(got - float(level)) <= 0.05, level


# Forecasts --------------------------------------------------------------------


def _at(account_tz: str, day: str, hour: int) -> datetime:
    return localize(datetime.fromisoformat(f"{day}T{hour:02d}:30"), account_tz)


def test_forecast_fields_and_interval(demo_workspace):
    draft = (ROOT / "demo_data" / "sample_draft.txt").read_text().strip()
    f = demo_workspace.forecaster.forecast(
        [Draft(text=draft, account="loomhaven", planned_at=_at("Europe/London", "2026-12-02", 12))],
        coverage=0.9,
        now=NOW,
    )[0]
    assert 0 <= f.low <= f.median <= f.high
    assert f.coverage == 0.9
    assert f.backtested_coverage == pytest.approx(
        demo_workspace.forecaster.model("impressions").backtested_coverage["0.9"]
    )
    assert f.local_time.startswith("2026-12-02T12:30+00:00")
    assert len(f.precedents) >= 10
    sims = [p.similarity for p in f.precedents]
    assert sims == sorted(sims, reverse=True)
    weights = [p.weight for p in f.precedents if not p.still_gathering]
    assert sum(weights) == pytest.approx(1.0, abs=1e-3)
    d = f.model_dump(mode="json")
    assert "not a certainty" in d["caution"]


def test_wider_coverage_gives_wider_interval(demo_workspace):
    d = [
        Draft(
            text="Volunteers wanted for the autumn bulb planting",
            account="loomhaven",
            planned_at=_at("Europe/London", "2026-12-02", 12),
        )
    ]
    narrow = demo_workspace.forecaster.forecast(d, coverage=0.5, now=NOW)[0]
    wide = demo_workspace.forecaster.forecast(d, coverage=0.95, now=NOW)[0]
    assert wide.low <= narrow.low and wide.high >= narrow.high
    assert wide.high - wide.low > narrow.high - narrow.low


def test_contributions_add_up_to_the_prediction(demo_workspace):
    """TreeSHAP local accuracy (Lundberg et al. 2020): groups plus expected
    value equal the median model's raw output on the log scale."""
    fc = demo_workspace.forecaster
    drafts = [
        Draft(text=t, account=a, planned_at=_at(z, "2026-12-03", h))
        for t, a, z, h in [
            ("Behind the scenes in the glasshouse this morning", "loomhaven", "Europe/London", 9),
            (
                "New seed bank results are in https://loomhaven.example/lab",
                "loomhaven_lab",
                "America/New_York",
                15,
            ),
        ]
    ]
    out = fc.forecast(drafts, now=NOW)
    model = fc.model("impressions")
    view = fc.view("impressions")
    for d, f in zip(drafts, out, strict=True):
        vec = demo_workspace.embedder.encode([d.text])[0]
        x = fc.features(view, model.features, d, vec, NOW)[0]
        # the served median is a blend; its parts (TreeSHAP of the
        # boosted model times its weight, plus the linear candidates) add up
        # to it. Computed here from the model's own predict, not the answer.
        x = model.rows(x, vec.reshape(1, -1), [view.account_codes[d.account]])
        raw = model.forecaster.predict(x)[1][0]
        total = f.contributions.expected_log + sum(g.log_contribution for g in f.contributions.groups)
        assert total == pytest.approx(raw, abs=1e-6)
        assert [g.group for g in f.contributions.groups] == list(F.GROUPS)
        for g in f.contributions.groups:
            assert g.factor == pytest.approx(np.exp(g.log_contribution))


def _mean_log(ws, texts, account, when):
    out = ws.forecaster.forecast([Draft(text=t, account=account, planned_at=when) for t in texts], now=NOW)
    return float(np.mean([f.log[1] for f in out]))


def _texts(topic: str, *, link: bool | None = None, n: int = 12) -> list[str]:
    texts = {r["post_id"]: r for r in truth() if r["topic"] == topic and r["account"] == "loomhaven"}
    with (ROOT / "demo_data" / "posts.csv").open(newline="") as f:
        rows = [r for r in csv.DictReader(f) if r["post_id"] in texts]
    if link is not None:
        rows = [r for r in rows if ("https://" in r["text"]) == link]
    return [r["text"] for r in rows[-n:]]


def test_forecasts_recover_the_documented_better_hours(demo_workspace):
    """demo_data/effects.json: best hours are 12-13 local, nights about 0.7 lower."""
    best = EFFECTS["best_hours"][0]
    texts = _texts("events", link=False)
    noon = _mean_log(demo_workspace, texts, "loomhaven", _at("Europe/London", "2026-12-03", best))
    night = _mean_log(demo_workspace, texts, "loomhaven", _at("Europe/London", "2026-12-03", 3))
    assert noon - night > 0.2


def test_forecasts_recover_the_documented_link_effect(demo_workspace):
    """effects.json: a link lowers log impressions by 0.35."""
    assert EFFECTS["link"] < 0
    texts = _texts("behind_the_scenes", link=False)
    when = _at("Europe/London", "2026-12-03", 12)
    plain = _mean_log(demo_workspace, texts, "loomhaven", when)
    linked = _mean_log(
        demo_workspace, [t + " https://loomhaven.example/more" for t in texts], "loomhaven", when
    )
    assert linked < plain


def test_forecasts_recover_the_stronger_topics(demo_workspace):
    order = EFFECTS["topic_order_strongest_first"]
    when = _at("Europe/London", "2026-12-03", 12)
    strong = _mean_log(demo_workspace, _texts(order[0], link=False), "loomhaven", when)
    weak = _mean_log(demo_workspace, _texts(order[-1], link=False), "loomhaven", when)
    assert strong > weak


# Errors -----------------------------------------------------------------------


def test_clear_errors(demo_workspace, workspace):
    fc = demo_workspace.forecaster
    with pytest.raises(NotFound, match="unknown account"):
        fc.forecast([Draft(text="hello", account="nobody")])
    with pytest.raises(InputError, match="unknown metric"):
        fc.forecast([Draft(text="hello", account="loomhaven")], metric="vibes")
    with pytest.raises(InputError, match="coverage"):
        fc.forecast([Draft(text="hello", account="loomhaven")], coverage=0.99)
    with pytest.raises(NotReady, match="no model trained"):
        workspace.forecaster.forecast([Draft(text="hello", account="loomhaven")])
    with pytest.raises(NotReady, match="no model trained for engagements"):
        fc.forecast([Draft(text="hello", account="loomhaven")], metric="engagements")


def test_too_little_history_to_train(workspace, tmp_path):
    p = tmp_path / "few.csv"
    p.write_text(
        "post_id,account,text,posted_at,impressions\n"
        + "".join(
            f"{i},solo,post number {i} about tulips,2026-01-{1 + i % 28:02d}T10:00:00Z,{100 + i}\n"
            for i in range(30)
        )
    )
    workspace.import_csv(p, ImportOptions(new_accounts="UTC"))
    with pytest.raises(NotReady, match="training needs at least"):
        train(workspace, "impressions")


# Interfaces -------------------------------------------------------------------


def test_api_forecasts_single_and_batch(demo_workspace):
    client = TestClient(create_app(workspace=demo_workspace))
    one = client.post(
        "/v1/forecasts",
        json={
            "text": "Tulips opening in the Rose Arbour",
            "account": "loomhaven",
            "planned_at": "2026-12-02T10:00",
            "coverage": 0.8,
        },
    )
    assert one.status_code == 200, one.text
    body = one.json()
    for key in (
        "metric",
        "low",
        "median",
        "high",
        "coverage",
        "backtested_coverage",
        "model_version",
        "precedents",
        "contributions",
        "caution",
    ):
        assert key in body
    # A naive planned time is read in the account's zone (Europe/London, GMT in December).
    assert body["planned_at"].startswith("2026-12-02T10:00:00")
    assert set(body["precedents"][0]) >= {
        "post_id",
        "account",
        "similarity",
        "weight",
        "posted_at",
        "text",
        "metrics",
    }
    many = client.post(
        "/v1/forecasts",
        json={
            "drafts": [
                {"text": "Tulips opening", "account": "loomhaven", "draft_id": "a"},
                {"text": "Lab open day", "account": "loomhaven_lab", "draft_id": "b"},
            ]
        },
    )
    assert many.status_code == 200, many.text
    assert [f["draft_id"] for f in many.json()["forecasts"]] == ["a", "b"]
    bad = client.post(
        "/v1/forecasts", json={"text": "x", "account": "loomhaven", "planned_at": "next tuesday"}
    )
    assert bad.status_code == 422 and "cannot read time" in bad.json()["error"]["message"]
    assert client.post("/v1/forecasts", json={"text": "x", "account": "ghost"}).status_code == 404
    r = client.post("/v1/forecasts", json={"text": "x", "account": "loomhaven", "metric": "likes"})
    assert r.status_code == 409 and r.json()["error"]["code"] == "not_ready"


def test_cli_check_json(backend_demo_home, embedder, monkeypatch):
    from typer.testing import CliRunner

    from service.cli import app
    from service.cli.base import use_embedder

    use_embedder(embedder)
    monkeypatch.setenv("SOUNDING_HOME", str(backend_demo_home))
    res = CliRunner().invoke(
        app,
        [
            "check",
            "Seed bank results",
            "--account",
            "loomhaven_lab",
            "--at",
            "2026-12-02T10:00+01:00",
            "--json",
        ],
    )
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert set(data) >= {
        "metric",
        "low",
        "median",
        "high",
        "coverage",
        "backtested_coverage",
        "model_version",
        "precedents",
        "contributions",
    }
    assert data["planned_at"] == "2026-12-02T09:00:00+00:00"
    res = CliRunner().invoke(app, ["check", "x", "--account", "loomhaven", "--at", "soon"])
    assert res.exit_code == 1 and "cannot read time" in res.output
    assert "Traceback" not in res.output
