"""Upload files of the API's imports, and clearing the ones left behind.

An upload is streamed to ``uploads/upload-*.csv`` in the data directory and
removed when its import ends. A process killed in between left the file,
and with it the texts of every post in it, even after those posts were
forgotten. So each upload's file is held with an OS lock (``flock``) for as
long as it is in use, and the OS drops that lock when its holder dies: a
file whose lock can be taken belongs to nobody and is removed, at start and
on every forget, while uploads in flight (in this or another process) stay.
"""

from __future__ import annotations

import fcntl
import os
import tempfile
import time
from pathlib import Path

PATTERN = "upload-*.csv"
NEW_GRACE_SECONDS = 60


def new_upload(directory: Path) -> tuple[Path, int, int]:
    """A new upload file: (path, a descriptor to write it through, the
    descriptor holding its lock; close it after removing the file)."""
    fd, tmp = tempfile.mkstemp(prefix=".new-upload-", suffix=".csv", dir=directory)
    held = os.open(tmp, os.O_RDONLY)
    fcntl.flock(held, fcntl.LOCK_EX | fcntl.LOCK_NB)
    # Named for the sweep only once locked, so the sweep never takes a file
    # that is being created.
    path = Path(tmp).with_name(Path(tmp).name.removeprefix(".new-"))
    os.replace(tmp, path)
    return path, fd, held


def release(path: Path | None, held: int | None) -> None:
    """Remove an upload's file, then let go of its lock."""
    if path is not None:
        path.unlink(missing_ok=True)
    if held is not None:
        os.close(held)


def sweep(directory: Path) -> list[Path]:
    """Remove upload files no live process holds; returns what was removed."""
    removed: list[Path] = []
    try:
        candidates = sorted(Path(directory).glob(PATTERN)) + sorted(Path(directory).glob(".new-" + PATTERN))
    except OSError:
        return removed
    for p in candidates:
        try:
            if p.name.startswith(".new-") and time.time() - p.stat().st_mtime < NEW_GRACE_SECONDS:
                continue  # a creator may be between making it and locking it
            fd = os.open(p, os.O_RDONLY)
        except OSError:
            continue  # gone meanwhile
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            os.close(fd)
            continue  # in use
        try:
            p.unlink(missing_ok=True)
            removed.append(p)
        except OSError:
            pass
        finally:
            os.close(fd)
    return removed
