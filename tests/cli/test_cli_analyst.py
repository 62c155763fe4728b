"""The analyst's commands as a thin layer: --json is the library's answer,
--csv the table as shown (RFC 4180, plain headers, whole numbers), --plot a
figure, and bad input a one-line message."""

from __future__ import annotations

import csv
import json
import re
from pathlib import Path

import pytest
from conftest import NOW
from typer.testing import CliRunner

from models.embedding import Embedder
from service.cli import app
from service.cli.base import use_embedder

runner = CliRunner()
WHOLE = re.compile(r"^-?\d+$")


@pytest.fixture(autouse=True)
def _demo(embedder: Embedder, demo_home: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    use_embedder(embedder)
    monkeypatch.setenv("SOUNDING_HOME", str(demo_home))  # read-only use
    monkeypatch.setenv("SOUNDING_NOW", NOW.isoformat())
    monkeypatch.delenv("SOUNDING_TOKEN", raising=False)


def _csv(path: Path) -> list[list[str]]:
    raw = path.read_bytes()
    assert b"\r\n" in raw  # RFC 4180 line ends
    return list(csv.reader(raw.decode("utf-8").splitlines()))


def test_distribution_json_csv_and_plot(tmp_path: Path) -> None:
    r = runner.invoke(
        app, ["distribution", "--json", "--csv", str(tmp_path / "d.csv"), "--plot", str(tmp_path / "d.svg")]
    )
    assert r.exit_code == 0, r.output
    a = json.loads(r.stdout)
    head, *rows = _csv(tmp_path / "d.csv")
    assert head == ["from", "to", "posts"]
    assert all(WHOLE.match(c) for row in rows for c in row)
    assert sum(int(row[2]) for row in rows) == a["n_posts"] - a["zero_posts"]
    assert (tmp_path / "d.svg").read_text(encoding="utf-8").lstrip().startswith("<?xml")
    bad = runner.invoke(app, ["distribution", "--plot", str(tmp_path / "d.gif")])
    assert bad.exit_code == 1 and "figure format" in bad.output and "Traceback" not in bad.output


def test_segments_by_month_and_by_hour_csv(tmp_path: Path) -> None:
    r = runner.invoke(app, ["segments", "--by", "month", "--json", "--csv", str(tmp_path / "m.csv")])
    assert r.exit_code == 0, r.output
    a = json.loads(r.stdout)
    head, *rows = _csv(tmp_path / "m.csv")
    assert head[:3] == ["series", "month", "posts"]
    assert len(rows) == len(a["periods"]) and [row[1] for row in rows] == a["periods"]
    assert all(WHOLE.match(c) for row in rows for c in row[2:7] if c)
    text = runner.invoke(app, ["segments", "--by", "week", "--last", "8"])
    assert text.exit_code == 0 and "last 8 weeks" in text.output and "association" in text.output
    r = runner.invoke(app, ["segments", "--by", "hour", "--csv", str(tmp_path / "h.csv")])
    assert r.exit_code == 0, r.output
    head, *rows = _csv(tmp_path / "h.csv")
    assert head[:3] == ["split", "segment", "posts"] and rows
    assert all(WHOLE.match(c) for row in rows for c in row[2:8])


def test_topics_csv_has_one_row_per_post(tmp_path: Path) -> None:
    r = runner.invoke(app, ["topics", "--json", "--csv", str(tmp_path / "t.csv")])
    assert r.exit_code == 0, r.output
    a = json.loads(r.stdout)
    head, *rows = _csv(tmp_path / "t.csv")
    assert head == ["post id", "topic"] and len(rows) == a["n_posts"]
    names = {t["name"] for t in a["topics"]}
    assert {row[1] for row in rows} == names
    assert len({row[0] for row in rows}) == len(rows)
