"""Commands that look after the store itself: forget, backup and copy-to."""

from __future__ import annotations

import sqlite3

import typer

from models.errors import InputError, StoreError
from service.cli.base import app, out, workspace
from service.store import Store
from service.storecopy import copy_store


@app.command("forget")
def forget_cmd(
    account: str | None = typer.Option(
        None, "--account", help="Forget this account (with --post: the post's account)."
    ),
    post: str | None = typer.Option(None, "--post", help="Forget only this post id."),
    yes: bool = typer.Option(False, "--yes", "-y", help="Do not ask for confirmation."),
) -> None:
    """Delete an account, or one post, with its metrics and vectors, for good."""
    if account is None and post is None:
        raise InputError("say what to forget: --account HANDLE, or --post ID [--account HANDLE]")
    ws = workspace()
    if post is None:
        assert account is not None  # checked above: one of the two is given
        info = ws.store.account(account)  # an unknown account fails here, before asking
        what = f"account {info.handle} and its {info.posts} posts"
    else:
        what = f"post {post}" + (f" of account {account}" if account else "")
    if not yes:
        typer.confirm(f"Forget {what}? This cannot be undone", abort=True)
    deleted = ws.forget(account=account, post_id=post)
    out.print(f"forgot {deleted} posts; {ws.store.counts()['posts']} posts left")


@app.command("backup")
def backup_cmd(
    # A string, not a Path: a trailing "/" says DEST is a directory to create.
    dest: str = typer.Argument(
        ...,
        help="New file for the copy, or a directory (an existing "
        "one, or DIR/ to create it) that receives a dated copy.",
    ),
) -> None:
    """Copy the store to DEST while the service may keep running (SQLite online backup).

    A PostgreSQL store is backed up with pg_dump; the command says how.
    """
    path = workspace().store.backup(dest)
    con = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    try:
        check = con.execute("PRAGMA integrity_check").fetchone()[0]
        posts = con.execute("SELECT COUNT(*) FROM posts").fetchone()[0]
    finally:
        con.close()
    if check != "ok":
        raise StoreError(f"the copy at {path} failed its integrity check: {check}")
    out.print(f"backed up {posts} posts to {path} (integrity check ok)")
    out.print("to restore: stop the service, copy the file to sounding.db in a data directory")


@app.command("copy-to")
def copy_to_cmd(
    url: str = typer.Argument(
        ..., help="SQLAlchemy URL of an empty store, e.g. postgresql+psycopg://USER@HOST/DB."
    ),
) -> None:
    """Copy every account, post, metric and vector into another, empty store.

    How a team moves the history kept in a SQLite file onto a shared
    PostgreSQL server; trained models are files: copy the forecasters directory too.
    """
    src = workspace().store
    dest = Store(url=url)
    try:
        copied = copy_store(src, dest)
    finally:
        dest.close()
    out.print(
        f"copied {copied['posts']} posts, {copied['snapshots']} metric snapshots and "
        f"{copied['vectors']} vectors to {dest.safe_url}"
    )
