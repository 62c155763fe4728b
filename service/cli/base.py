"""The Typer app, its error handling and helpers shared by command modules."""

from __future__ import annotations

import json
import os
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Any

import typer
from rich.console import Console
from typer.core import TyperGroup

from models.errors import NotFound, NotReady, SoundingError

if TYPE_CHECKING:
    # Imported where used: --help and the light commands load neither
    # pydantic-settings nor the workspace's store, index and model code.
    # typer runs its own copy of click; its groups take that copy's Context.
    from typer._click.core import Context as ClickContext

    from models.embedding import Embedder
    from service.cli.warmup import Preload
    from service.workspace import Workspace

out = Console(soft_wrap=True)
err = Console(stderr=True, soft_wrap=True)


class ErrorsAsMessages(TyperGroup):
    """Turns the library's named errors into clean messages."""

    def invoke(self, ctx: ClickContext) -> Any:
        try:
            return super().invoke(ctx)
        except SoundingError as exc:
            # Printed here and ended with typer.Exit: typer >= 0.29 runs its own
            # copy of click, which does not catch click.ClickException.
            err.print(f"Error: {exc}", markup=False, highlight=False)
            # Missing data on an empty directory: say where to start.
            step = next_step() if isinstance(exc, (NotFound, NotReady)) else None
            if step:
                err.print(step, markup=False, highlight=False)
            raise typer.Exit(1) from None


def next_step() -> str | None:
    """On a data directory with no posts yet, what to do first. Only an
    already open workspace is asked: a failing command never creates one."""
    if _workspace is None:
        return None
    try:
        empty = _workspace.store.counts()["posts"] == 0
    except SoundingError:
        return None
    if not empty:
        return None
    return (
        f"This data directory ({_workspace.settings.resolved_home}) holds no posts yet. "
        "Start with `sounding import posts.csv` (your history), then `sounding train`; "
        "or try `sounding demo` on invented data."
    )


app = typer.Typer(
    cls=ErrorsAsMessages,
    name="sounding",
    help="A sounding board for social-media drafts, from your team's own post history.",
    invoke_without_command=True,
    add_completion=False,
    pretty_exceptions_show_locals=False,
    # Plain help: the rich renderer shows every flag as taking a value ("--json <bool>").
    rich_markup_mode=None,
)

# What `sounding` alone prints: the way in, then the commands grouped by purpose.
# tests/test_cli.py checks that every registered command appears here exactly once.
GETTING_STARTED = """\
sounding: a sounding board for social-media drafts, from your team's own post history.

Getting started (the data directory is --home, $SOUNDING_HOME or ./.sounding):
  1. sounding import posts.csv        your history (see the README for the CSV columns)
  2. sounding train                   a forecast model and its backtest
  3. sounding check "a draft" --account HANDLE
  Or try it all on invented data first: sounding demo

Commands by purpose:
{groups}
Every command has --help."""

PURPOSES: dict[str, list[str]] = {
    "Your history": ["account", "accounts", "import", "mapping", "reindex"],
    "Before posting": ["precedents", "check", "hours", "compare"],
    "What worked, and how good the forecasts are": ["segments", "train", "backtest", "track-record"],
    "The analyst's questions": ["distribution", "topics", "map", "surprises"],
    "Keeping things": ["forget", "backup", "restore", "copy-to", "serve", "demo", "model"],
}


def getting_started(registered: list[str]) -> str:
    """The getting-started text, listing only commands that exist."""
    lines = []
    for purpose, names in PURPOSES.items():
        present = [n for n in names if n in registered]
        if present:
            lines.append(f"  {purpose + ':':<46} {', '.join(present)}")
    return GETTING_STARTED.format(groups="\n".join(lines) + "\n")


@app.callback()
def _root(
    ctx: typer.Context,
    home: Path | None = typer.Option(
        None, "--home", help="Data directory (default: $SOUNDING_HOME or ./.sounding)."
    ),
) -> None:
    if home is not None:
        os.environ["SOUNDING_HOME"] = str(home)
    if ctx.invoked_subcommand is None:
        # typer runs its own copy of click, so the group is not a click.Group.
        names = sorted(ctx.command.list_commands(ctx))  # type: ignore[attr-defined]
        out.print(getting_started(names), markup=False, highlight=False)


_workspace: Workspace | None = None
_embedder: Embedder | None = None
_preload: Preload | None = None  # the saved index being read (service/cli/warmup.py)


def workspace(*, create: bool = False) -> Workspace:
    """The workspace of this invocation. The embedder is kept per process,
    so tests that run many commands load the model once.

    Only commands that store something (``create``) make a data directory:
    a mistyped --home on a read gets a clear error, not a new empty one."""
    global _workspace, _embedder, _preload
    from service.settings import get_settings
    from service.workspace import Workspace

    settings = get_settings()
    home = settings.resolved_home
    if not create and settings.database_url is None and not home.exists():
        raise NotFound(
            f"there is no data directory at {home}",
            field="--home",
            value=str(home),
            hint="check --home or SOUNDING_HOME; `sounding import` or `sounding demo` makes one",
        )
    if _workspace is None or _workspace.settings.resolved_home != settings.resolved_home:
        if _workspace is not None:
            _workspace.close()
        preload, _preload = _preload, None
        saved = preload.saved_index if preload and preload.index_dir == settings.index_dir else None
        _workspace = Workspace(settings=settings, embedder=_embedder, saved_index=saved)
        _embedder = _workspace.embedder
    return _workspace


def close_workspace() -> None:
    """Let go of this invocation's workspace (a restore needs the directory to itself)."""
    global _workspace
    if _workspace is not None:
        _workspace.close()
        _workspace = None


def embedder_in_use() -> bool:
    """Whether this process already has an embedder (loaded or loading)."""
    return _embedder is not None


def use_preload(preload: Preload) -> None:
    """Use the embedder and saved index a thread is already reading."""
    global _embedder, _workspace, _preload
    _embedder, _workspace, _preload = preload.embedder, None, preload


def use_embedder(embedder: Embedder) -> None:
    """Share an already loaded embedder (the test suite's one)."""
    global _embedder, _workspace, _preload
    _embedder, _workspace, _preload = embedder, None, None


def print_json(data: Any) -> None:
    sys.stdout.write(json.dumps(data, indent=2, ensure_ascii=False, default=str) + "\n")


def is_terminal() -> bool:
    return sys.stdout.isatty()
