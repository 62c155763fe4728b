"""Tables fit the terminal: at 80 and at 120 columns every table row is one
line, numbers and times are whole, and post text is cut with an ellipsis."""

from __future__ import annotations

import shutil
import sqlite3
from collections.abc import Iterator
from pathlib import Path

import pytest
from rich.cells import cell_len
from typer.testing import CliRunner

from service.cli import app
from service.cli.base import out, use_embedder
from service.cli.prose import plural, wrap
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
    (["hours", DRAFT, "--account", "loomhaven_lab", "--day", "2026-12-03", "--week"], None, 3),
    (["segments", "--topic", "flowers in bloom", "--topic", "volunteering"], None, 3),
    (["check", DRAFT, "--accounts", "all", "--at", "2026-12-03T12:00"], "accounts, best first", 3),
    (["accounts", "--details"], None, 3),
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
        # Prose too (verdicts, examples, cautions, headlines): wrapped at word
        # boundaries, so no line of the output runs past the terminal.
        for line in res.output.splitlines():
            assert cell_len(line.rstrip()) <= width, (args[0], width, line)


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


@pytest.mark.parametrize("args", [COMMANDS[0][0], COMMANDS[1][0], COMMANDS[3][0]])
def test_text_columns_get_at_least_30_cells_at_80_columns(
    demo_cli: None, args: list[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(out, "width", 80)
    res = CliRunner().invoke(app, args)
    assert res.exit_code == 0, res.output
    lines = res.output.splitlines()
    header = next(line for line in lines if line.rstrip().endswith("text"))
    start = header.index("text")
    body = table_bodies(res.output)[0]
    cut = [line[start:].rstrip() for line in body if line.rstrip().endswith(ELLIPSIS)]
    assert cut, "the demo's texts are longer than the room: some must be cut"
    # The text column takes the room the other columns leave: at least 30 cells.
    assert all(cell_len(c) >= 30 for c in cut), cut


def test_prose_wraps_at_word_boundaries() -> None:
    text = "no link: higher than the rest: median 1,406 vs 995; clearly different from the rest"
    lines = wrap(text, 40, indent="  ", hanging="    ").splitlines()
    assert len(lines) > 1 and all(len(line) <= 40 for line in lines)
    # Nothing lost or split inside a word (textwrap, Python standard library).
    assert " ".join(line.strip() for line in lines) == text
    assert lines[0].startswith("  ") and all(line.startswith("    ") for line in lines[1:])


def test_counted_nouns_take_the_right_plural() -> None:
    # English plurals (common practice, no source).
    assert plural(1, "account") == "1 account"
    assert plural(2, "account") == "2 accounts"
    assert plural(0, "outcome") == "0 outcomes"
    assert plural(1234, "post") == "1,234 posts"


def test_help_names_values_in_words(demo_cli: None) -> None:
    """--help shows TEXT, HANDLE, N, FILE, never a Python type such as <str>."""
    import re

    from test_vocabulary import cli_help

    help_text = cli_help()
    types = re.findall(r"<(?:str|int|float|path|bool|list\[[^>]*\]|[a-z]+ range)>", help_text)
    assert not types, sorted(set(types))
    assert "--account HANDLE" in help_text and "--at TIME" in help_text and "--plot FILE" in help_text


def test_team_s_usual_only_with_a_team() -> None:
    from models.explain import describe

    assert "team's usual" in describe("account baseline", 0.3, team=True).summary
    alone = describe("account baseline", 0.3, team=False).summary
    assert "team" not in alone and "its longer-run usual" in alone
