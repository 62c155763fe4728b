"""Who has a data directory open, so a restore can refuse to swap the store
underneath them.

Every workspace that can write (a running service, a command) holds a
shared OS lock (``flock``) on ``in-use.lock`` for as long as it is open; a
restore needs the exclusive lock, which no holder of the shared one allows.
The OS drops a lock when its process dies, so a killed service never blocks
a restore. Imports, forgets and training also take the write lock
(service.storage.locking); a restore takes both.
"""

from __future__ import annotations

import fcntl
import os
from pathlib import Path

from models.errors import Busy

PRESENCE_FILE = "in-use.lock"


class Presence:
    """A shared (in use) or exclusive (being restored) hold on a data directory."""

    def __init__(self, home: Path, *, exclusive: bool = False) -> None:
        self.path = Path(home) / PRESENCE_FILE
        self._fd: int | None = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o600)
        try:
            fcntl.flock(self._fd, (fcntl.LOCK_EX if exclusive else fcntl.LOCK_SH) | fcntl.LOCK_NB)
        except OSError:
            os.close(self._fd)
            self._fd = None
            if exclusive:
                raise Busy(
                    f"another sounding process (a service or a command) has {home} open",
                    hint="stop the service and let running commands finish, then restore",
                ) from None
            raise Busy(
                f"{home} is being restored from a backup", hint="try again when the restore has finished"
            ) from None

    def release(self) -> None:
        if self._fd is not None:
            os.close(self._fd)
            self._fd = None
