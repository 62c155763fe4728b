"""One writer at a time on a data directory.

Imports, forgets, reindexing and training change the store and the index
together; two of them at once left the index short of posts while its
fingerprint claimed it was current, and let an import re-create an account
that a forget had just removed. So every change runs under two locks:

- a thread lock, the API's own queue: request threads of one service wait
  their turn here instead of racing each other;
- a lock file (``write.lock`` in the data directory, an OS file lock taken
  with ``filelock``) that every sounding process on this machine respects.
  The OS releases it when its holder dies, so a killed import never leaves
  the directory locked.

A second writer waits up to ``SOUNDING_WRITE_WAIT_SECONDS`` and then gets
``Busy`` (409 over HTTP, a one-line message in the CLI). The lock file
cannot span machines: several services sharing one PostgreSQL database rely
on the database's own transactions instead.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import filelock

from models.errors import Busy

LOCK_FILE = "write.lock"


class WriteLock:
    """The writer's lock of one data directory (re-entrant within a thread)."""

    def __init__(self, *, path: Path, wait_seconds: float) -> None:
        self.path = Path(path)
        self.wait_seconds = wait_seconds
        self._threads = threading.Lock()
        self._owner: int | None = None
        self._depth = 0
        self._what = ""
        # thread_local=False: this object is the one holder in this process,
        # handed from thread to thread by the thread lock above.
        self._file = filelock.FileLock(str(self.path), thread_local=False, preserve_lock_file=True)

    @contextmanager
    def hold(self, what: str) -> Iterator[None]:
        """Hold the lock for ``what`` (an import, a forget...), waiting a bounded time."""
        me = threading.get_ident()
        if self._owner == me:  # nested: a forget that reindexes, a train that reads
            self._depth += 1
            try:
                yield
            finally:
                self._depth -= 1
            return
        deadline = time.monotonic() + self.wait_seconds
        if not self._threads.acquire(timeout=max(self.wait_seconds, 0)):
            raise self._busy(what, f"this service is running {self._what or 'another change'}")
        try:
            try:
                self._file.acquire(timeout=max(deadline - time.monotonic(), 0))
            except filelock.Timeout:
                raise self._busy(what, "another sounding process is changing this data directory") from None
            self._owner, self._depth, self._what = me, 1, what
            try:
                yield
            finally:
                self._owner, self._depth, self._what = None, 0, ""
                self._file.release()
        finally:
            self._threads.release()

    def _busy(self, what: str, why: str) -> Busy:
        return Busy(
            f"cannot start {what}: {why}, and it did not finish within {self.wait_seconds:g} s",
            hint="try again when it has finished (SOUNDING_WRITE_WAIT_SECONDS sets the wait)",
        )
