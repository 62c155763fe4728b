"""The command line imports what the command needs, and nothing heavy to
print help or to list accounts and mappings.

Each command runs in a fresh interpreter (a subprocess), which then lists
``sys.modules``: the only honest way to see what a start-up loads. Every
command is taken from the typer app itself, so a new command is covered.
"""

from __future__ import annotations

import os
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from typer.main import get_command

from service.cli import app, warmup
from service.cli.lazy import catalogue

ROOT = Path(__file__).resolve().parents[2]

#: Libraries a light command must not load (each costs a large part of a second or more).
HEAVY = ("pandas", "lightgbm", "sklearn", "scipy", "matplotlib", "fastapi", "torch", "onnxruntime", "uvicorn")
#: The list of commands reads no data directory either: none of the store's, index's or
#: settings' libraries (a command's own --help may load its module's imports).
HELP_HEAVY = (*HEAVY, "sqlalchemy", "faiss", "pydantic", "numpy")

# Runs the command line as the `sounding` script does, then prints the loaded
# modules as the process ends (main() ends it through service.cli.process_end,
# which runs atexit handlers first).
PROBE = r"""
import atexit, sys
sys.argv = ["sounding", *sys.argv[1:]]
atexit.register(lambda: print("\n@@modules", " ".join(sorted(sys.modules)), flush=True))
from service.cli import main
main()
"""


def _paths(group: Any, prefix: tuple[str, ...] = ()) -> Iterator[tuple[str, ...]]:
    # typer runs its own copy of click: a group is anything with commands.
    for name, cmd in group.commands.items():
        yield (*prefix, name)
        if hasattr(cmd, "commands"):
            yield from _paths(cmd, (*prefix, name))


ALL_PATHS = list(_paths(get_command(app)))


def loaded(*args: str, home: Path | None = None) -> tuple[int, set[str], str]:
    env = {**os.environ, "PYTHONPATH": str(ROOT), "HF_HUB_OFFLINE": "1", "COLUMNS": "120"}
    if home is not None:
        env["SOUNDING_HOME"] = str(home)
    r = subprocess.run(
        [sys.executable, "-c", PROBE, *args], capture_output=True, text=True, env=env, cwd=ROOT, timeout=300
    )
    head, _, tail = r.stdout.rpartition("\n@@modules ")
    assert tail, f"the probe printed no module list: {r.stderr[-2000:]}"
    return r.returncode, set(tail.split()), head


def heavy(mods: set[str], libraries: tuple[str, ...] = HEAVY) -> list[str]:
    return sorted({m.split(".")[0] for m in mods} & set(libraries))


def test_root_help_imports_no_command_module() -> None:
    code, mods, text = loaded("--help")
    assert code == 0
    assert heavy(mods, HELP_HEAVY) == []
    # The listing comes from the source: no command's module runs for it.
    assert not {m for m in mods if m.startswith("service.cli.")} - {
        "service.cli.base",
        "service.cli.lazy",
        "service.cli.metavars",
        "service.cli.warmup",  # os and threading only: it loads nothing until a command asks
        "service.cli.process_end",  # os, atexit and threading: how the process ends
    }
    for name in catalogue():
        assert f"  {name} " in text
    assert any(p == ("mapping", "list") for p in ALL_PATHS)  # sub-commands are walked too


@pytest.mark.parametrize("path", ALL_PATHS, ids=" ".join)
def test_command_help_loads_nothing_heavy(path: tuple[str, ...]) -> None:
    code, mods, text = loaded(*path, "--help")
    assert code == 0, text
    assert "Usage:" in text
    assert heavy(mods) == [], f"`sounding {' '.join(path)} --help` loaded {heavy(mods)}"


@pytest.mark.parametrize("args", [("accounts",), ("mapping", "list")], ids=" ".join)
def test_listing_commands_load_nothing_heavy(args: tuple[str, ...], demo_home: Path) -> None:
    code, mods, text = loaded(*args, home=demo_home)
    assert code == 0, text
    assert heavy(mods) == [], f"`sounding {' '.join(args)}` loaded {heavy(mods)}"
    if args == ("accounts",):
        assert "loomhaven" in text.lower()  # the demo's accounts were listed


def test_the_catalogue_is_what_typer_registers() -> None:
    """The names, order and one-line help read from source are the ones the
    built commands carry (checked on the fully imported app)."""
    root: Any = get_command(app)
    built = dict(root.commands.items())  # builds every command
    assert list(catalogue()) == list(built)
    for name, entry in catalogue().items():
        assert entry.help == (built[name].help or "").strip(), name
        assert entry.hidden == built[name].hidden, name


def test_a_figure_loads_matplotlib_and_serving_loads_fastapi_only_there() -> None:
    """matplotlib and FastAPI are imported by what draws and what serves."""
    probe = (
        "import sys; import service.segments.segmenting, service.track.report, models.track_plots;"
        "import service.cli.history;"
        "print(sorted({m.split('.')[0] for m in sys.modules} & {'matplotlib', 'fastapi', 'uvicorn'}))"
    )
    env = {**os.environ, "PYTHONPATH": str(ROOT), "HF_HUB_OFFLINE": "1"}
    r = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, env=env, cwd=ROOT)
    assert r.returncode == 0, r.stderr
    assert r.stdout.strip() == "[]"


@pytest.mark.parametrize(
    "args",
    [
        ("check", "Snowdrops by the lake path this week", "--account", "loomhaven"),
        ("hours", "Snowdrops by the lake path this week", "--account", "loomhaven", "--week"),
    ],
    ids=lambda a: a[0],
)
def test_a_cold_forecast_reads_the_kept_view_and_loads_nothing_heavy(
    args: tuple[str, ...], demo_home: Path
) -> None:
    # The history view is kept between commands (service.history.viewcache), so a
    # forecast from the command line needs pandas no more than the trees' package;
    # a store without reference accounts builds no view of them either.
    first_code, _, first_text = loaded(*args, home=demo_home)
    assert first_code == 0, first_text
    code, mods, text = loaded(*args, home=demo_home)
    assert code == 0, text
    # The embedding runs on ONNX Runtime; nothing else heavy is needed.
    libraries = tuple(m for m in HEAVY if m != "onnxruntime")
    assert heavy(mods, libraries) == [], f"`sounding {args[0]}` loaded {heavy(mods, libraries)}"


# The embedding model loads in a thread while a forecasting command starts
# (service/cli/warmup.py); the answer is the one given without. Here, so the
# ONNX export the first cold run makes is made once for the file.
DRAFT = ("check", "Snowdrops by the lake path this week", "--account", "loomhaven")
FIXED = ("--at", "2026-12-05T10:00", "--json", "--no-record")


def test_only_commands_that_embed_a_draft_start_loading() -> None:
    assert warmup.wanted("check", ["a draft", "--account", "x"])
    assert warmup.wanted("hours", [])
    assert not warmup.wanted("check", ["--help"])  # help loads nothing heavy
    assert not warmup.wanted("accounts", [])
    assert not warmup.wanted("train", [])


def test_the_answer_is_the_same_with_and_without_the_early_load(
    demo_home: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # Fresh interpreters, as the `sounding` script runs. A first run makes the
    # ONNX export the early load reads (without it there is nothing to load early).
    code, _, text = loaded(*DRAFT, *FIXED, home=demo_home)
    assert code == 0, text
    assert any((demo_home / "embedding").glob("onnx-*/export.json"))
    code, _, early = loaded(*DRAFT, *FIXED, home=demo_home)
    assert code == 0, early
    monkeypatch.setenv("SOUNDING_EMBED_PRELOAD", "0")
    code, _, late = loaded(*DRAFT, *FIXED, home=demo_home)
    assert code == 0, late
    assert early == late


def test_the_early_load_reads_the_export_and_the_index_without_embedding(
    demo_home: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from models.index import VectorIndex

    code, _, text = loaded(*DRAFT, *FIXED, home=demo_home)  # the export exists after one run
    assert code == 0, text
    monkeypatch.setenv("SOUNDING_HOME", str(demo_home))
    preload = warmup.start()
    assert preload is not None
    index = preload.saved_index()  # waits for the thread
    assert preload.embedder.backend_ == "onnx" and preload.embedder.calls == 0
    on_disk = VectorIndex.load(demo_home / "index")
    assert index.fingerprint_ == on_disk.fingerprint_ and index.ntotal == on_disk.ntotal == 3000
    monkeypatch.setenv("SOUNDING_EMBED_PRELOAD", "0")
    assert warmup.start() is None
    monkeypatch.setenv("SOUNDING_EMBED_PRELOAD", "1")
    monkeypatch.setenv("SOUNDING_EMBED_BACKEND", "torch")
    assert warmup.start() is None


def test_nothing_loads_early_where_no_export_was_saved(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("SOUNDING_HOME", str(tmp_path))
    assert warmup.start() is None
    assert warmup.start(str(tmp_path / "elsewhere")) is None
