"""Keeps a running service in step with a store other processes write to.

Service replicas share one store: an import through one must reach
forecasts through the others. Each request already checks the store's
change stamp (``Workspace.index``); this thread checks it every few
seconds too, so the rebuild happens in the background and the next request
finds a fresh index and fresh history views. A rebuilt index replaces the old one whole, under the
workspace's lock: no request ever searches a half-built one.
"""

from __future__ import annotations

import logging
import threading
from collections.abc import Iterator
from contextlib import contextmanager

from models.errors import SoundingError
from service.workspace import Workspace

log = logging.getLogger("sounding.refresher")


@contextmanager
def refreshing(ws: Workspace, *, every: float) -> Iterator[None]:
    """Refresh ``ws``'s index every ``every`` seconds while inside (0: never)."""
    if every <= 0:
        yield
        return
    stop = threading.Event()

    def run() -> None:
        while not stop.wait(every):
            try:
                ws.index()
                ws.forecaster.warm()  # the history views forecasts use, too
            except SoundingError as exc:  # the store is briefly away: try again next time
                log.warning("index refresh failed: %s", exc)

    thread = threading.Thread(target=run, name="sounding-refresh", daemon=True)
    thread.start()
    try:
        yield
    finally:
        stop.set()
        thread.join(timeout=30)
