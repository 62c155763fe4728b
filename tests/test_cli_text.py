"""What the command line says when nothing is asked of it, and how its help reads."""

from __future__ import annotations

from typer.testing import CliRunner

from service.cli import app
from service.cli.base import PURPOSES

runner = CliRunner()


def registered() -> list[str]:
    result = runner.invoke(app, ["--help"])
    assert result.exit_code == 0
    # Plain click help lists commands under "Commands:", two spaces in.
    block = result.output.split("Commands:", 1)[1]
    return [line.split()[0] for line in block.splitlines() if line.startswith("  ") and line.strip()]


def test_every_command_has_a_purpose_exactly_once() -> None:
    grouped = [name for names in PURPOSES.values() for name in names]
    cmds = registered()
    assert cmds, "no commands found in --help"
    missing = sorted(set(cmds) - set(grouped))
    assert not missing, f"commands with no place in the getting-started text: {missing}"
    assert len(grouped) == len(set(grouped))


def test_no_command_prints_getting_started_with_every_command() -> None:
    result = runner.invoke(app, [])
    assert result.exit_code == 0
    assert "sounding import" in result.output and "sounding train" in result.output
    listed = result.output.split("Commands by purpose:", 1)[1]
    for name in registered():
        assert name in listed, name


def test_flags_show_as_flags_in_help() -> None:
    # A flag takes no value: its help line must not show a value placeholder.
    result = runner.invoke(app, ["precedents", "--help"])
    assert result.exit_code == 0
    json_line = next(line for line in result.output.splitlines() if "--json" in line)
    assert "<bool>" not in json_line and "BOOLEAN" not in json_line
