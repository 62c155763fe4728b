"""Restore a data directory's store from a backup (``sounding restore``).

Copying a backup over ``sounding.db`` is not a restore: SQLite replays a
``sounding.db-wal`` left beside it onto the copied file (after a clean stop
too), so the copy silently took the old store's last changes, and a copy
taken by hand from a live file can fail its integrity check. A restore here:

1. refuses while anything has the directory open (service.storage.presence) or is
   writing (service.storage.locking); it stops nothing itself;
2. checks the backup (``PRAGMA integrity_check``, the store's tables);
3. reads, from the forget log (service.storage.forget_log), which forgotten posts and
   accounts the backup holds again, before changing anything;
4. copies the backup beside the store, checks the copy, removes the stale
   ``-wal`` and ``-shm`` files, then renames the copy into place;
5. rebuilds the index and the history views from the restored store, and,
   when asked, forgets again what came back.
"""

from __future__ import annotations

import os
import shutil
import sqlite3
from dataclasses import dataclass, field
from datetime import UTC
from pathlib import Path

from models.embedding import Embedder
from models.errors import InputError, StoreError
from service.settings import Settings
from service.storage.forget_log import Forgotten, read
from service.storage.locking import LOCK_FILE, WriteLock
from service.storage.presence import Presence
from service.workspace import Workspace

NEEDED_TABLES = {"accounts", "posts", "snapshots", "vectors", "schema_version"}


@dataclass(slots=True)
class Restored:
    """What a restore did."""

    backup: Path
    posts: int
    back: list[Forgotten] = field(default_factory=list)  # forgotten since, present again
    forgotten_again: int = 0  # posts deleted again


def check_backup(path: Path) -> int:
    """The backup's post count once it passes SQLite's integrity check and
    holds a store's tables; a clear error otherwise."""
    if not path.is_file():
        raise InputError(f"no backup file at {path}", where=str(path))
    try:
        con = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
        try:
            check = con.execute("PRAGMA integrity_check").fetchone()[0]
            tables = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
            posts = con.execute("SELECT COUNT(*) FROM posts").fetchone()[0] if "posts" in tables else 0
        finally:
            con.close()
    except sqlite3.Error as exc:
        raise InputError(f"{path} is not a readable SQLite store: {exc}", where=str(path)) from None
    if check != "ok":
        raise StoreError(
            f"the backup {path} failed its integrity check: {check}",
            where=str(path),
            hint="restore an older backup; this one is damaged",
        )
    missing = NEEDED_TABLES - tables
    if missing:
        raise InputError(
            f"{path} is a SQLite file but not a sounding store (no {', '.join(sorted(missing))})",
            where=str(path),
        )
    return int(posts)


def coming_back(backup: Path, log: list[Forgotten]) -> list[Forgotten]:
    """The logged forgets whose account or post ``backup`` holds again."""
    con = sqlite3.connect(f"file:{backup}?mode=ro", uri=True)
    try:
        created = {r[0]: r[1] for r in con.execute("SELECT handle, created_at FROM accounts")}
        back: dict[tuple[str, str | None], Forgotten] = {}
        for e in log:
            # Rows made after the forget (an account or post imported again
            # on purpose) are not the forgotten ones: times are naive UTC.
            after = e.at.astimezone(UTC).replace(tzinfo=None).isoformat(sep=" ", timespec="microseconds")
            if e.account not in created or str(created[e.account]) > after:
                continue
            if e.post_id is not None:
                found = con.execute(
                    "SELECT p.imported_at FROM posts p JOIN accounts a ON a.id = p.account_id "
                    "WHERE a.handle = ? AND p.post_id = ?",
                    (e.account, e.post_id),
                ).fetchone()
                if found is None or str(found[0]) > after:
                    continue
            back[(e.account, e.post_id)] = e
    finally:
        con.close()
    # A post of an account that comes back whole goes with its account.
    whole = {a for a, p in back if p is None}
    return [e for (a, p), e in back.items() if p is None or a not in whole]


def _store_file(settings: Settings) -> Path:
    if settings.database_url is not None and not settings.database_url.startswith("sqlite:///"):
        raise StoreError(
            "this data directory uses a PostgreSQL store; `sounding restore` restores SQLite backups",
            hint="restore a pg_dump into an empty database with pg_restore -d URL sounding.dump",
        )
    return Path(settings.db_url.removeprefix("sqlite:///"))


def _fsync_dir(d: Path) -> None:
    fd = os.open(d, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def swap_in(backup: Path, settings: Settings) -> int:
    """Replace the store with a checked copy of ``backup``, holding the
    directory exclusively; returns the restored post count."""
    db = _store_file(settings)
    home = settings.resolved_home
    home.mkdir(parents=True, exist_ok=True)
    presence = Presence(home, exclusive=True)
    try:
        writer = WriteLock(path=home / LOCK_FILE, wait_seconds=0)
        with writer.hold("a restore"):
            tmp = db.with_name(f".restore-{db.name}-{os.getpid()}")
            try:
                shutil.copyfile(backup, tmp)
                with open(tmp, "rb+") as f:
                    os.fsync(f.fileno())
                posts = check_backup(tmp)  # the copy itself, as it will be used
                # The old store's journal files first: left beside the new file,
                # SQLite would replay the old store's pages onto it.
                for suffix in ("-wal", "-shm", "-journal"):
                    db.with_name(db.name + suffix).unlink(missing_ok=True)
                os.replace(tmp, db)
                _fsync_dir(db.parent)
            except OSError as exc:
                raise StoreError(
                    f"the restore from {backup} failed ({exc.strerror}); the store was not replaced"
                    if db.exists()
                    else f"the restore from {backup} failed ({exc.strerror})",
                    hint="check the free space and permissions of the data directory",
                ) from None
            finally:
                tmp.unlink(missing_ok=True)
            # The index was built from the old store: never trust it for this one.
            shutil.rmtree(settings.index_dir, ignore_errors=True)
    finally:
        presence.release()
    return posts


def restore(
    backup: str | Path,
    settings: Settings,
    *,
    forget_again: bool,
    embedder: Embedder | None = None,
) -> Restored:
    """Restore ``backup`` into ``settings``' data directory, rebuild the
    index and views, and forget again what came back when ``forget_again``."""
    path = Path(backup).expanduser().resolve()
    _store_file(settings)
    check_backup(path)
    back = coming_back(path, read(settings.resolved_home))
    posts = swap_in(path, settings)
    ws = Workspace(settings=settings, embedder=embedder)
    try:
        ws.reindex()
        ws.forecaster.warm()
        again = 0
        if forget_again:
            for e in back:
                again += ws.forget(account=e.account, post_id=e.post_id)
        return Restored(backup=path, posts=posts - again, back=back, forgotten_again=again)
    finally:
        ws.close()
