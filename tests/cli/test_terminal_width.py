"""Tables fit the terminal: at 80 and at 120 columns every table row is one
line, numbers and times are whole, and post text is cut with an ellipsis."""

from __future__ import annotations

import shutil
import sqlite3
from collections.abc import Iterator
from pathlib import Path

import pytest
from typer.testing import CliRunner

from service.cli import app
from service.cli.base import out, use_embedder
from service.cli.render import ELLIPSIS, Column, fit_table

DRAFT = "The magnolias along the Long Border are opening this week. Come for a slow walk."

# command, the table's title (as printed above it), how many rows it must have
COMMANDS = [
    (["precedents", DRAFT, "-k", "5"], "precedents", 5),
    (["check", DRAFT, "--account", "loomhaven", "--at", "2026-12-03T12:00", "--no-record"], "precedents", 8),
    (["hours", DRAFT, "--account", "loomhaven", "--day", "2026-12-03"], None, 3),
    (
        [
            "compare",
            "--account",
            "loomhaven",
            "--at",
            "2026-12-03T12:00",
            DRAFT,
            "Magnolia week on the Long Border: come and see them before the petals drop",
        ],
        None,
        2,
    ),
    (["segments", "--by", "link"], "impressions by link", 2),
    # Topics crossed with a split: the topic table, then the two-way table of medians.
    (["segments", "--topic", "flowers in bloom", "--by", "link"], None, 2),
    (["accounts"], None, 3),
    (["track-record"], None, 1),  # no forecast given yet: the overall row only
]


@pytest.fixture()
def demo_cli(demo_home: Path, tmp_path: Path, embedder, monkeypatch: pytest.MonkeyPatch) -> Iterator[None]:
    home = tmp_path / "home"
    shutil.copytree(demo_home, home)
    # Other tests forecast through the shared demo directory (and so record there):
    # an empty track record makes its table's row count known.
    with sqlite3.connect(home / "sounding.db") as db:
        db.execute("DELETE FROM forecast_matches")
        db.execute("DELETE FROM forecasts_given")
    monkeypatch.setenv("SOUNDING_HOME", str(home))
    use_embedder(embedder)
    yield


def table_bodies(text: str) -> list[list[str]]:
    """The body lines of each table: after the header rule, up to a blank line."""
    lines = text.splitlines()
    bodies, i = [], 0
    while i < len(lines):
        if set(lines[i].strip()) == {"─"}:
            body = []
            i += 1
            while i < len(lines) and lines[i].strip():
                body.append(lines[i])
                i += 1
            bodies.append(body)
        i += 1
    return bodies


@pytest.mark.parametrize("width", [80, 120])
def test_every_table_row_is_one_line(demo_cli: None, width: int, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(out, "width", width)
    for args, _, rows in COMMANDS:
        res = CliRunner().invoke(app, args)
        assert res.exit_code == 0, (args, res.output)
        bodies = table_bodies(res.output)
        assert bodies, f"no table in the output of {args[0]}"
        first = bodies[0]
        # One line per row: a wrapped row would add lines.
        assert len(first) == rows, (args[0], width, first)
        for body in bodies:
            for line in body:
                assert len(line.rstrip()) <= width, (args[0], width, line)


def test_text_is_cut_with_an_ellipsis_and_numbers_are_whole() -> None:
    from io import StringIO

    from rich.console import Console

    long = "word " * 60
    buf = StringIO()
    Console(file=buf, width=80).print(
        fit_table(
            [Column(header="impressions", right=True), Column(header="text", free=True)],
            [["1,234,567", long]],
            width=80,
        )
    )
    body = table_bodies(buf.getvalue())[0]
    assert len(body) == 1
    assert "1,234,567" in body[0] and body[0].rstrip().endswith(ELLIPSIS)
    # --wide: the text wraps in full instead (several lines, nothing cut).
    buf = StringIO()
    Console(file=buf, width=80).print(
        fit_table(
            [Column(header="impressions", right=True), Column(header="text", free=True)],
            [["1,234,567", long]],
            width=80,
            wide=True,
        )
    )
    body = table_bodies(buf.getvalue())[0]
    assert len(body) > 1 and ELLIPSIS not in "".join(body)
    assert "".join(body).count("word") == 60
