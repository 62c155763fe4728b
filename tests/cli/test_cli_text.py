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


def test_an_empty_data_directory_says_what_to_do_next(tmp_path, embedder) -> None:
    from service.cli.base import use_embedder

    use_embedder(embedder)
    (tmp_path / "empty").mkdir()  # a read command never makes one itself
    env = {"SOUNDING_HOME": str(tmp_path / "empty")}
    listed = runner.invoke(app, ["accounts"], env=env)
    assert listed.exit_code == 0
    assert "sounding import" in listed.output and "sounding train" in listed.output
    checked = runner.invoke(app, ["check", "Snowdrops are out", "--account", "nobody"], env=env)
    assert checked.exit_code == 1 and "Traceback" not in checked.output
    assert "holds no posts yet" in checked.output and "sounding import" in checked.output
