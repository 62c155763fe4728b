"""What a forget does beyond deleting rows: log it, scrub the track record,
and clear the copies left outside the tables.

``Workspace.forget`` deletes the posts through ``Store.forget`` with
:func:`hook` run in the same transaction, then calls :func:`clear_leftovers`:

- the forget log (service.storage.forget_log) gets the ids before the commit;
- the track record's copies go in the same transaction (service.storage.track_forget);
- upload files left by killed imports are removed (service.storage.uploads);
- SQLite's write-ahead log is checkpointed and truncated, so the pages that
  held the deleted rows are not kept in ``sounding.db-wal`` (the rows
  themselves are overwritten in place: ``secure_delete``, service.storage.store).
"""

from __future__ import annotations

import logging
import sqlite3
from collections.abc import Callable, Sequence
from pathlib import Path

from sqlalchemy.orm import Session

from service.storage.forget_log import append, entries_for
from service.storage.store import Store
from service.storage.track_forget import scrub_track_record
from service.storage.uploads import sweep

log = logging.getLogger("sounding.forget")

Hook = Callable[..., object]


def hook(home: Path) -> Hook:
    """``Store.forget``'s ``also``: log, then scrub the track record."""

    def also(
        s: Session, rows: Sequence[tuple[int, str, str, str, int]], *, account: tuple[int, str] | None
    ) -> None:
        append(home, entries_for(list(rows), account))
        scrub_track_record(s, rows, account=account)

    return also


def truncate_wal(store: Store) -> bool:
    """Checkpoint a SQLite store's write-ahead log and cut it to nothing;
    False when a reader kept it (its pages are reused, and so overwritten,
    later). Waits one second at most: a forget must not stall behind a long
    read."""
    if store.backend != "sqlite" or store.read_only:
        return False
    try:
        con = sqlite3.connect(store.url.removeprefix("sqlite:///"), timeout=1)
        try:
            busy = con.execute("PRAGMA wal_checkpoint(TRUNCATE)").fetchone()
        finally:
            con.close()
    except sqlite3.Error as exc:
        log.warning("the write-ahead log was not checkpointed after a forget: %s", exc)
        return False
    return busy is not None and int(busy[0]) == 0


def clear_leftovers(store: Store, uploads_dir: Path) -> None:
    for p in sweep(uploads_dir):
        log.warning("removed %s, an upload left by an import that did not finish", p.name)
    truncate_wal(store)
