"""A scheduling script's plan file: rows forecast in place, bad rows kept with a
reason, duplicate ids refused, and media carried into the forecast."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import pytest
from fastapi.testclient import TestClient
from typer.testing import CliRunner

from models.errors import CSVFormatError
from service.api.app import create_app
from service.cli import app
from service.cli.base import use_embedder
from service.forecast.draft import Draft
from service.plan import OUT_COLUMNS, forecast_plan

ROOT = Path(__file__).resolve().parents[1]
EFFECTS = json.loads((ROOT / "demo_data" / "effects.json").read_text())
HEADER = "draft_id,account,text,planned_at\n"


def _rows(dest: Path) -> list[dict[str, str]]:
    with dest.open(encoding="utf-8", newline="") as f:
        return list(csv.DictReader(f))  # RFC 4180 reader


def test_bad_rows_get_a_reason_and_counts_add_up(demo_workspace, tmp_path):
    src = tmp_path / "plan.csv"
    src.write_text(
        HEADER + 'd1,loomhaven,"Magnolias, at last",2026-12-02T12:00\n'
        "d2,ghost,Hello,2026-12-02T12:00\n"
        "d3,loomhaven,Bad time,2026-13-40T99:00\n"
        "d4,loomhaven_lab,Seed bank news,\n"
    )
    dest = tmp_path / "out.csv"
    counts = forecast_plan(demo_workspace, src, dest)
    assert (counts.rows, counts.forecast, counts.failed) == (4, 2, 2)
    rows = _rows(dest)
    assert tuple(rows[0]) == OUT_COLUMNS
    by_id = {r["draft_id"]: r for r in rows}
    assert float(by_id["d1"]["low"]) <= float(by_id["d1"]["median"]) <= float(by_id["d1"]["high"])
    assert by_id["d1"]["top_precedent_id"]
    assert "unknown account" in by_id["d2"]["warnings"] and by_id["d2"]["median"] == ""
    assert "cannot read time" in by_id["d3"]["warnings"]
    assert by_id["d4"]["model_version"]


def test_duplicate_draft_ids_are_refused_naming_the_lines(demo_workspace, tmp_path):
    src = tmp_path / "plan.csv"
    src.write_text(
        HEADER + "same,loomhaven,Magnolias are out,2026-12-02T12:00\n"
        "other,loomhaven,Volunteers wanted,2026-12-02T12:00\n"
        '"same",loomhaven_lab,"Seed bank\nnews",2026-12-03T12:00\n'
    )
    dest = tmp_path / "out.csv"
    with pytest.raises(CSVFormatError) as err:
        forecast_plan(demo_workspace, src, dest)
    # Lines as a text editor counts them (RFC 4180: a quoted field may hold a line break).
    assert "'same' on lines 2, 4" in err.value.message
    assert err.value.field == "draft_id"
    assert not dest.exists()


def test_missing_column_and_bad_encoding_store_nothing(demo_workspace, tmp_path):
    src = tmp_path / "plan.csv"
    src.write_text("draft_id,account,text\nd1,loomhaven,Hello\n")
    with pytest.raises(CSVFormatError, match=r"lacks column.*planned_at"):
        forecast_plan(demo_workspace, src, tmp_path / "out.csv")
    src.write_bytes(HEADER.encode() + b"d1,loomhaven,Caf\xe9 opens,2026-12-02T12:00\n")
    with pytest.raises(CSVFormatError, match="UTF-8"):
        forecast_plan(demo_workspace, src, tmp_path / "out.csv")
    assert not (tmp_path / "out.csv").exists()


def test_media_reaches_the_forecast_from_every_door(
    demo_workspace, demo_home, embedder, monkeypatch, tmp_path
):
    text, at = "Frost on the Winter Walk and the witch hazels glowing", "2026-12-02T12:00"
    fc = demo_workspace.forecaster
    base, media = fc.forecast(
        [Draft(text=text, account="loomhaven"), Draft(text=text, account="loomhaven", has_media=True)]
    )
    # Source: demo_data/effects.json "media": +0.2 on log impressions when media is attached.
    assert EFFECTS["media"] > 0
    assert media.median > base.median

    api = TestClient(create_app(workspace=demo_workspace))
    body = {"text": text, "account": "loomhaven", "planned_at": at}
    plain = api.post("/v1/forecasts", json=body).json()
    with_media = api.post("/v1/forecasts", json={**body, "has_media": True}).json()
    assert with_media["median"] > plain["median"]

    src = tmp_path / "plan.csv"
    src.write_text(
        "draft_id,account,text,planned_at,has_media\n"
        f"a,loomhaven,{text},{at},false\nb,loomhaven,{text},{at},true\n"
        f"c,loomhaven,{text},{at},perhaps\n"
    )
    dest = tmp_path / "out.csv"
    counts = forecast_plan(demo_workspace, src, dest)
    rows = {r["draft_id"]: r for r in _rows(dest)}
    assert (counts.forecast, counts.failed) == (2, 1)
    assert int(rows["a"]["median"]) == round(plain["median"])  # whole counts in the file
    assert int(rows["b"]["median"]) == round(with_media["median"])
    assert "'perhaps' is not true or false" in rows["c"]["warnings"]

    use_embedder(embedder)
    monkeypatch.setenv("SOUNDING_HOME", str(demo_home))
    res = CliRunner().invoke(app, ["check", text, "--account", "loomhaven", "--at", at, "--media", "--json"])
    assert res.exit_code == 0, res.output
    assert json.loads(res.stdout)["median"] == with_media["median"]
    res = CliRunner().invoke(app, ["check", "--plan", str(src), "--out", str(dest)])
    # A row that cannot be forecast exits 3, as import does for rejected rows.
    assert res.exit_code == 3 and "2 of 3 drafts forecast" in res.output
    res = CliRunner().invoke(app, ["check", "--plan", str(src), "--out", str(dest), "--allow-rejects"])
    assert res.exit_code == 0 and "2 of 3 drafts forecast" in res.output
