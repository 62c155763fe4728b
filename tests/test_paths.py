"""Paths no other test reaches: train and backtest from the command line,
training engagement rate, a corrupt or unsupported model directory, backups
into one directory twice, and two imports or two trainings at once."""

from __future__ import annotations

import csv
import io
import json
import shutil
import threading
from collections.abc import Iterator
from pathlib import Path

import pytest
from conftest import AUTH, NOW, TOKEN, history_csv
from fastapi.testclient import TestClient
from typer.testing import CliRunner

from models.artefact import CONFIG, TrainedModel, versions
from models.errors import NotReady
from service.api.app import create_app
from service.cli import app as cli_app
from service.cli.base import use_embedder
from service.forecast.draft import Draft
from service.forecast.training import train
from service.ingest.options import ImportOptions
from service.settings import Settings
from service.workspace import Workspace

ACCOUNTS = ("loomhaven", "loomhaven_lab")
N = 300


@pytest.fixture(scope="module")
def small_home(tmp_path_factory: pytest.TempPathFactory, embedder) -> Path:
    """300 invented posts of 2025 over two accounts, with engagements."""
    home = tmp_path_factory.mktemp("paths") / "home"
    ws = Workspace(settings=Settings(home=home), embedder=embedder)
    (home.parent / "h.csv").write_bytes(history_csv(N, prefix="p", accounts=ACCOUNTS, engagements=True))
    ws.import_csv(home.parent / "h.csv", ImportOptions(new_accounts="UTC"))
    ws.close()
    return home


@pytest.fixture()
def ws(small_home: Path, tmp_path: Path, embedder) -> Iterator[Workspace]:
    shutil.copytree(small_home, tmp_path / "home")
    ws = Workspace(settings=Settings(home=tmp_path / "home", token=TOKEN), embedder=embedder)
    yield ws
    ws.close()


def _rows() -> list[dict[str, str]]:
    data = history_csv(N, prefix="p", accounts=ACCOUNTS, engagements=True).decode()
    return list(csv.DictReader(io.StringIO(data)))  # RFC 4180 reader


def test_train_and_backtest_commands(ws: Workspace, tmp_path: Path, embedder) -> None:
    use_embedder(embedder)
    env = {"SOUNDING_HOME": str(ws.settings.resolved_home)}
    runner = CliRunner()
    res = runner.invoke(cli_app, ["train", "--skip-backtest"], env=env)
    assert res.exit_code == 0, res.output
    found = versions(ws.settings.models_dir, "impressions")
    assert len(found) == 1 and found[0] in res.output
    m = TrainedModel.load(ws.settings.models_dir / "impressions" / found[0])
    # Every post of the file is from 2025, long settled: all of them train or calibrate.
    assert m.report["n_posts"] == len(_rows()) == N
    assert m.report["n_train"] + m.report["n_calibration"] == N
    assert "backtest" not in m.report
    out = tmp_path / "bt.json"
    res = runner.invoke(
        cli_app, ["backtest", "--folds", "2", "--coverage", "0.7", "--json", str(out)], env=env
    )
    assert res.exit_code == 0, res.output
    report = json.loads(out.read_text())
    assert report["n_folds"] == 2 and report["coverage_nominal"] == 0.7
    assert "sounding, combined" in res.output and "account median" in res.output


def test_training_engagement_rate(ws: Workspace) -> None:
    m = train(ws, "engagement_rate", now=NOW, backtest=False)
    # Engagement rate = engagements / impressions (common practice, no source);
    # it does not exist where impressions are 0, as on every 10th row of the file.
    rates = [int(r["engagements"]) / int(r["impressions"]) for r in _rows() if int(r["impressions"]) > 0]
    assert m.report["n_posts"] == len(rates) == N - N // 10
    f = ws.forecaster.forecast(
        [Draft(text="Snowdrops open early", account="loomhaven", planned_at=NOW)],
        metric="engagement_rate",
        now=NOW,
    )[0]
    assert f.metric == "engagement_rate" and f.model_version == m.version
    assert 0 <= f.low <= f.median <= f.high
    # The middle estimate of a quantile model stays among the rates it learnt from.
    assert min(rates) <= f.median <= max(rates)


@pytest.mark.parametrize(
    ("config", "says"),
    [
        ("{not json", "unreadable"),
        (json.dumps({"format": 999, "metric": "impressions", "version": "v"}), "unsupported"),
    ],
)
def test_corrupt_or_unsupported_model_directory(ws: Workspace, embedder, config: str, says: str) -> None:
    d = ws.settings.models_dir / "impressions" / "20990101T000000000Z"
    d.mkdir(parents=True)
    (d / CONFIG).write_text(config)
    (d / "report.json").write_text("{}")
    # A damaged version is skipped (issue: damaged artefacts never take the
    # service down); with no intact one left, the answer says which and why.
    with pytest.raises(NotReady, match=says) as err:
        ws.forecaster.model("impressions")
    assert d.name in err.value.message
    use_embedder(embedder)
    res = CliRunner().invoke(
        cli_app,
        ["check", "Snowdrops open early", "--account", "loomhaven"],
        env={"SOUNDING_HOME": str(ws.settings.resolved_home)},
    )
    assert res.exit_code == 1 and says in res.output and "Traceback" not in res.output


def test_backup_into_a_directory_twice(ws: Workspace, tmp_path: Path, embedder) -> None:
    use_embedder(embedder)
    backups = tmp_path / "backups"
    backups.mkdir()
    env = {"SOUNDING_HOME": str(ws.settings.resolved_home)}
    for _ in range(2):
        res = CliRunner().invoke(cli_app, ["backup", f"{backups}/"], env=env)
        assert res.exit_code == 0, res.output
        assert f"backed up {N} posts" in res.output
    copies = sorted(backups.iterdir())
    # Two whole, self-contained files (no -wal or -shm beside them): a second
    # backup never overwrites or refuses the first.
    assert len(copies) == 2 and all(c.suffix == ".db" for c in copies), copies
    assert str(copies[-1]) in res.output


def test_two_imports_at_once(ws: Workspace, tmp_path: Path) -> None:
    files = []
    for name in ("a", "b"):
        p = tmp_path / f"{name}.csv"
        p.write_bytes(history_csv(40, prefix=f"two-{name}", accounts=ACCOUNTS))
        files.append(p)
    results: dict[str, int] = {}
    errors: list[BaseException] = []

    def run(p: Path) -> None:
        try:
            results[p.name] = ws.import_csv(p, ImportOptions(new_accounts="UTC")).added
        except BaseException as exc:  # reported below
            errors.append(exc)

    threads = [threading.Thread(target=run, args=(p,)) for p in files]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert errors == []
    assert results == {"a.csv": 40, "b.csv": 40}
    assert ws.store.counts()["posts"] == N + 80
    assert ws.index_state() == {"state": "ready", "count": N + 80}


def test_two_training_requests_at_once(ws: Workspace) -> None:
    client = TestClient(create_app(workspace=ws))
    answers: list[tuple[int, dict]] = []

    def run() -> None:
        r = client.post("/v1/training", json={"backtest": False}, headers=AUTH)
        answers.append((r.status_code, r.json()))

    threads = [threading.Thread(target=run) for _ in range(2)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    ok = [body for status, body in answers if status == 200]
    assert ok and all(status in (200, 409) for status, _ in answers), answers
    made = versions(ws.settings.models_dir, "impressions")
    assert sorted(b["model_version"] for b in ok) == made  # one whole directory each
    for v in made:
        assert TrainedModel.load(ws.settings.models_dir / "impressions" / v).version == v
