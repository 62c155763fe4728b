"""``sounding restore``: put a backup back as the data directory's store."""

from __future__ import annotations

import sys
from pathlib import Path

import typer

from models.errors import InputError
from service.cli import base
from service.cli.base import app, out
from service.restore import check_backup, coming_back, restore
from service.settings import get_settings
from service.storage.forget_log import Forgotten, read


def _named(e: Forgotten) -> str:
    return f"account {e.account}" if e.post_id is None else f"post {e.post_id} of account {e.account}"


@app.command("restore")
def restore_cmd(
    backup: Path = typer.Argument(..., help="A backup file made by `sounding backup`."),
    forget_again: bool = typer.Option(
        False, "--forget-again", help="Forget again, without asking, what was forgotten since the backup."
    ),
    bring_back: bool = typer.Option(
        False, "--bring-back", help="Keep, without asking, what was forgotten since the backup."
    ),
) -> None:
    """Replace this data directory's store with BACKUP, then rebuild the index.

    Stop the service first: the restore refuses while a service or a command
    has the data directory open. Posts forgotten since the backup was made
    are in it again; the restore lists them and forgets them again when asked.
    """
    if forget_again and bring_back:
        raise InputError("say either --forget-again or --bring-back, not both")
    settings = get_settings()
    path = backup.expanduser().resolve()
    check_backup(path)  # a damaged backup fails here, before any question
    back = coming_back(path, read(settings.resolved_home))
    if back and not (forget_again or bring_back):
        names = "\n".join(f"  {_named(e)}" for e in back)
        out.print(f"{len(back)} forgotten since this backup would come back:\n{names}", markup=False)
        if not sys.stdin.isatty():
            raise InputError("say whether to forget them again: --forget-again, or --bring-back to keep them")
        forget_again = typer.confirm("Forget them again?", default=True)
    base.close_workspace()  # this process must not hold the directory itself
    done = restore(path, settings, forget_again=forget_again, embedder=base._embedder)
    out.print(f"restored {done.posts} posts from {done.backup}; index and history views rebuilt")
    if done.back and forget_again:
        out.print(f"forgot again {len(done.back)} forgotten since the backup ({done.forgotten_again} posts)")
    elif done.back:
        out.print(
            f"{len(done.back)} forgotten since the backup are back: forget them again with `sounding forget`"
        )
