"""What the track record reads of a data directory: its store, settings,
embedder and forecaster (a ``Workspace``), as a Protocol."""

from __future__ import annotations

from typing import Protocol

from service.datadir import DataDir
from service.forecast.forecaster import Forecaster


class TrackedDir(DataDir, Protocol):
    """A data directory with its forecaster."""

    @property
    def forecaster(self) -> Forecaster: ...
