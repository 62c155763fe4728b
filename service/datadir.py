"""What the layers below the workspace may read of a data directory.

A Protocol, so training, backtests and segments take a ``Workspace`` without
importing it (the workspace sits above them and imports them).
"""

from __future__ import annotations

from contextlib import AbstractContextManager
from typing import Protocol

from models.embedding import Embedder
from service.retrieval import Retriever
from service.settings import Settings
from service.store import Store


class DataDir(Protocol):
    """A data directory's store, settings, embedder and retrieval (a ``Workspace``)."""

    @property
    def store(self) -> Store: ...

    @property
    def settings(self) -> Settings: ...

    @property
    def embedder(self) -> Embedder: ...

    @property
    def retrieval(self) -> Retriever: ...

    def writing(self, what: str) -> AbstractContextManager[None]:
        """Hold the data directory's write lock for ``what`` (service.locking)."""
        ...
