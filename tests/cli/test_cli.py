"""The ``sounding`` command line: help for every command, clean failures, JSON output."""

from __future__ import annotations

import json
import re
from collections.abc import Iterator
from pathlib import Path

import click
import pytest
from typer.main import get_command
from typer.testing import CliRunner

from models.embedding import Embedder
from models.metrics import METRIC_COLUMNS
from service.cli import app
from service.cli.base import use_embedder

runner = CliRunner()

CSV = (
    "ID,Body,When,Views\n"
    "c1,Snowdrops along the woodland walk,2026-02-01T09:00:00Z,500\n"
    "c2,Volunteer morning in the propagation house,2026-02-02T09:00:00Z,300\n"
    "c3,,2026-02-03T09:00:00Z,300\n"
)
MAP = ["--map", "post_id=ID", "--map", "text=Body", "--map", "posted_at=When", "--map", "impressions=Views"]


@pytest.fixture(autouse=True)
def _cli(embedder: Embedder, monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    use_embedder(embedder)  # reuse the session's model in every command
    monkeypatch.setenv("SOUNDING_HOME", str(tmp_path / "home"))
    monkeypatch.delenv("SOUNDING_TOKEN", raising=False)


def run(*args: str):
    return runner.invoke(app, list(args))


def _plain(text: str) -> str:
    """Help text without rich's box drawing and line wrapping."""
    return " ".join(re.sub(r"[│╭╮╰╯─]", " ", text).split())


def _commands(
    group: click.Group, prefix: tuple[str, ...] = ()
) -> Iterator[tuple[tuple[str, ...], click.Command]]:
    for name, cmd in sorted(group.commands.items()):
        yield (*prefix, name), cmd
        if isinstance(cmd, click.Group):
            yield from _commands(cmd, (*prefix, name))


ROOT = get_command(app)
ALL_COMMANDS = list(_commands(ROOT))


def test_root_help() -> None:
    r = run("--help")
    assert r.exit_code == 0
    assert "A sounding board for social-media drafts" in _plain(r.output)
    for path, _ in ALL_COMMANDS:
        assert path[0] in r.output
    # No arguments: a getting-started text, not an error (tests/cli/test_cli_text.py checks it).
    bare = run()
    assert bare.exit_code == 0 and "Getting started" in bare.output


def test_the_history_commands_are_registered() -> None:
    names = {p[0] for p, _ in ALL_COMMANDS}
    assert {"account", "accounts", "import", "reindex", "precedents", "serve", "demo"} <= names


@pytest.mark.parametrize("path", [p for p, _ in ALL_COMMANDS], ids=" ".join)
def test_every_command_has_help(path: tuple[str, ...]) -> None:
    cmd = dict(ALL_COMMANDS)[path]
    description = (cmd.help or "").strip()
    assert description, f"`sounding {' '.join(path)}` has no description"
    r = run(*path, "--help")
    assert r.exit_code == 0, r.output
    first = _plain(description.split("\n\n")[0])
    assert first in _plain(r.output)
    assert "Traceback" not in r.output


def assert_clean_failure(r, *fragments: str) -> str:
    """Exit code 1, one line of message, no traceback."""
    assert r.exit_code == 1, r.output
    assert r.exception is None or isinstance(r.exception, SystemExit), repr(r.exception)
    lines = [ln for ln in r.output.splitlines() if ln.strip()]
    assert len(lines) == 1, r.output
    assert "Traceback" not in r.output
    for f in fragments:
        assert f in lines[0], lines[0]
    return lines[0]


def test_unknown_timezone_is_refused(tmp_path: Path) -> None:
    assert_clean_failure(
        run("account", "garden", "--timezone", "Mars/Olympus"), "unknown time zone 'Mars/Olympus'"
    )
    (tmp_path / "a.csv").write_text(CSV)
    assert_clean_failure(
        run("import", str(tmp_path / "a.csv"), *MAP, "--account", "g", "--timezone", "Mars/Olympus"),
        "unknown time zone",
    )
    # Nothing was created by the refusals.
    r = run("accounts", "--json")
    assert r.exit_code == 0 and json.loads(r.stdout) == []


@pytest.mark.parametrize(
    ("args", "fragment"),
    [
        (("import", "{tmp}/missing.csv"), "no such file"),
        (("import", "{tmp}/a.csv"), "missing required column"),
        (("import", "{tmp}/a.csv", "--map", "nonsense"), "must look like ours=theirs"),
        (("import", "{tmp}/a.csv", "--map", "text=Nope", "--account", "g"), "'Nope', which is not in"),
        (("import", "{tmp}/latin1.csv", "--account", "g"), "not UTF-8"),
        (("account", "two words"), "holds U+0020 (SPACE)"),
        (("precedents", "   "), "empty"),
        (("precedents", "hello", "--since", "last tuesday"), "cannot read time"),
        (("serve", "--host", "0.0.0.0"), "without SOUNDING_TOKEN"),
    ],
)
def test_expected_failures_are_one_line(args: tuple[str, ...], fragment: str, tmp_path: Path) -> None:
    (tmp_path / "home").mkdir()  # read commands never create a data directory
    (tmp_path / "a.csv").write_text(CSV)
    (tmp_path / "latin1.csv").write_bytes(
        "post_id,text,posted_at,impressions\np1,Caf\u00e9,2026-01-01T10:00Z,1\n".encode("latin-1")
    )
    assert_clean_failure(run(*(a.format(tmp=tmp_path) for a in args)), fragment)


def test_data_directory_that_is_a_file(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    (tmp_path / "not-a-dir").write_text("x")
    monkeypatch.setenv("SOUNDING_HOME", str(tmp_path / "not-a-dir"))
    assert_clean_failure(run("accounts"), "cannot use", "as the data directory")
    # --home says the same (it sets SOUNDING_HOME; monkeypatch restores it afterwards).
    assert_clean_failure(run("--home", str(tmp_path / "not-a-dir"), "accounts"), "data directory")


@pytest.mark.parametrize(
    ("variable", "value", "args"),
    [
        ("SOUNDING_EMBED_THREADS", "four", ("accounts",)),
        ("SOUNDING_NEIGHBOURS", "0", ("precedents", "a draft")),
        ("SOUNDING_EMBED_BACKEND", "gpu", ("mapping", "list")),
    ],
)
def test_a_wrong_setting_is_named_in_one_line(
    variable: str, value: str, args: tuple[str, ...], monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv(variable, value)
    line = assert_clean_failure(run(*args), variable, repr(value))
    assert "not a valid setting" in line


def test_import_with_mapping_and_account(tmp_path: Path) -> None:
    (tmp_path / "a.csv").write_text(CSV)
    assert run("account", "garden", "--name", "The Garden", "--timezone", "Europe/London").exit_code == 0
    r = run("import", str(tmp_path / "a.csv"), *MAP, "--account", "garden")
    assert r.exit_code == 3, r.output  # a row was rejected: a scheduled script must notice
    assert "added 2, updated 0, unchanged 0, rejected 1" in r.stdout
    assert "rejected line 4, column text: is empty" in r.stderr
    r = run("import", str(tmp_path / "a.csv"), *MAP, "--account", "garden", "--json", "--allow-rejects")
    assert r.exit_code == 0
    summary = json.loads(r.stdout)
    assert (summary["added"], summary["unchanged"], summary["rejected"], summary["embedded"]) == (0, 2, 1, 0)
    assert summary["problems"] == [
        {"line": 4, "column": "text", "reason": "is empty", "hint": None, "post_id": "c3"}
    ]
    accounts = json.loads(run("accounts", "--json").stdout)
    assert accounts == [
        {
            "handle": "garden",
            "display_name": "The Garden",
            "timezone": "Europe/London",
            "posts": 2,
            "reference": False,
        }
    ]
    r = run("reindex")
    assert r.exit_code == 0 and "index rebuilt: 2 posts" in r.stdout


@pytest.fixture()
def demo_env(demo_home: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    monkeypatch.setenv("SOUNDING_HOME", str(demo_home))  # read-only use
    return demo_home


def test_precedents_json(demo_env: Path) -> None:
    r = run("precedents", "Come and see the magnolias by the lake", "-k", "4", "--json")
    assert r.exit_code == 0, r.output
    found = json.loads(r.stdout)["precedents"]
    assert len(found) == 4
    for p in found:
        assert {"post_id", "account", "posted_at", "text", "similarity", "metrics", "still_gathering"} <= set(
            p
        )
        assert set(p["metrics"]) == set(METRIC_COLUMNS)
    sims = [p["similarity"] for p in found]
    assert sims == sorted(sims, reverse=True)
    r = run("precedents", "Come and see the magnolias", "--account", "loomhaven_lab", "--json")
    assert {p["account"] for p in json.loads(r.stdout)["precedents"]} == {"loomhaven_lab"}
    # The table form prints too.
    r = run("precedents", "Come and see the magnolias", "-k", "2")
    assert r.exit_code == 0 and "precedents" in r.stdout


def test_failures_in_a_full_store(demo_env: Path) -> None:
    assert_clean_failure(run("precedents", "hello", "--account", "nobody"), "unknown account 'nobody'")
    assert_clean_failure(run("precedents", "hello", "-k", "0"), "k must be between")
    # The demo wants an empty data directory and says so before touching anything.
    assert_clean_failure(run("demo", "--no-train"), "already holds posts")
