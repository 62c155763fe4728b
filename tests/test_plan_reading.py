"""A plan file is read as an export is: time options, an account default,
whole counts out, and an exit status a scheduled script can act on."""

from __future__ import annotations

import csv
from pathlib import Path

import pytest
from typer.testing import CliRunner

from models.errors import CSVFormatError
from service.cli import app
from service.cli.base import use_embedder
from service.ingest.plan_options import PlanOptions
from service.plan import forecast_plan

runner = CliRunner()


def _rows(dest: Path) -> list[dict[str, str]]:
    with dest.open(encoding="utf-8", newline="") as f:
        return list(csv.DictReader(f))  # RFC 4180 reader


def test_day_first_plan_without_an_order_is_refused_not_a_traceback(demo_workspace, tmp_path):
    src = tmp_path / "plan.csv"
    src.write_text("draft_id,account,text,planned_at\nd1,loomhaven,Magnolias,10/12/2026 19:00\n")
    with pytest.raises(CSVFormatError, match="day-first or month-first"):
        forecast_plan(demo_workspace, src, tmp_path / "out.csv", record=False)


def test_every_row_unreadable_keeps_each_reason(demo_workspace, tmp_path):
    src = tmp_path / "plan.csv"
    src.write_text(
        "draft_id,account,text,planned_at\nd1,loomhaven,A,not a time\nd2,loomhavn,B,2026-12-02T10:00\n"
    )
    counts = forecast_plan(demo_workspace, src, tmp_path / "out.csv", record=False)
    assert (counts.forecast, counts.failed) == (0, 2)
    rows = _rows(tmp_path / "out.csv")
    assert "cannot read time" in rows[0]["warnings"]
    assert "did you mean loomhaven" in rows[1]["warnings"]


def test_options_account_default_and_whole_counts(demo_workspace, tmp_path):
    src = tmp_path / "plan.csv"
    src.write_text(
        "draft_id,text,planned_at\n"
        "d1,The magnolias are out in the walled garden,02/12/2026 19:00\n"
        "d2,Volunteers wanted for the seed library,03/12/2026 09:30\n"
    )
    dest = tmp_path / "out.csv"
    o = PlanOptions(account="Loomhaven", date_order="day-first")
    counts = forecast_plan(demo_workspace, src, dest, record=False, options=o)
    assert (counts.forecast, counts.failed) == (2, 0)
    rows = _rows(dest)
    assert [r["account"] for r in rows] == ["loomhaven", "loomhaven"]
    assert rows[0]["text"].startswith("The magnolias")
    # 2 December 19:00 in London is GMT (+00:00); IANA zone rules.
    assert rows[0]["planned_local"].startswith("2026-12-02T19:00")
    for r in rows:
        for col in ("low", "median", "high"):
            assert r[col].isdigit(), r[col]  # whole counts
        assert int(r["low"]) <= int(r["median"]) <= int(r["high"])
        assert r["coverage"] == "0.8" and "near_repeat" in r


def test_timezone_and_time_format(demo_workspace, tmp_path):
    src = tmp_path / "plan.csv"
    src.write_text("draft_id,account,text,planned_at\nd1,loomhaven,Tulips,2026.12.02 10h00\n")
    o = PlanOptions(timezone="Asia/Tokyo", time_format="%Y.%m.%d %Hh%M")
    forecast_plan(demo_workspace, src, tmp_path / "out.csv", record=False, options=o)
    # 10:00 in Tokyo (UTC+9, no summer time; IANA) is 01:00 UTC = 01:00 in London in December.
    assert _rows(tmp_path / "out.csv")[0]["planned_local"].startswith("2026-12-02T01:00")


def test_cli_plan_table_and_exit_status(embedder, demo_home, monkeypatch, tmp_path):
    use_embedder(embedder)
    monkeypatch.setenv("SOUNDING_HOME", str(demo_home))
    src = tmp_path / "plan.csv"
    src.write_text(
        "draft_id,text,planned_at\n"
        "d1,The magnolias are out in the walled garden,25/12/2026 19:00\n"
        "d2,Bad row,31/02/2026 19:00\n"
    )
    dest = tmp_path / "out.csv"
    args = ["check", "--plan", str(src), "--out", str(dest), "--account", "loomhaven", "--no-record"]
    r = runner.invoke(app, [*args, "--day-first"])
    assert r.exit_code == 3, r.output
    assert "d1" in r.stdout and "1 of 2 drafts forecast" in r.stdout
    assert "d2:" in r.stderr
    r = runner.invoke(app, [*args, "--day-first", "--allow-rejects"])
    assert r.exit_code == 0
    r = runner.invoke(app, [*args, "--day-first", "--month-first"])
    assert r.exit_code == 1 and "not both" in r.stderr
