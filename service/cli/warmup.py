"""The embedding model and the saved index load while a forecasting command
imports its code.

Before a draft can be embedded, a cold forecasting command spends about half
a second importing the store, the forecast and their schemas. ONNX Runtime
spends a quarter of a second hashing and reading its 90 MB graph, and at
100,000 posts the saved index takes as long to checksum and read; both run
in C++ or hashlib with the interpreter lock released, so on a machine with
two cores they overlap with the imports. They are read in a thread started
before the command's module is imported; the command's first embedding
waits for the model (``Embedder`` loads under its own lock) and its first
search for the index (``Workspace`` takes it from :meth:`Preload.saved_index`,
once, and checks it against the store as it checks any saved index).
"""

from __future__ import annotations

import os
import threading
from collections.abc import Sequence
from contextlib import suppress
from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from models.embedding import Embedder
    from models.index import VectorIndex

#: The commands that embed a draft on every run.
EMBEDDING_COMMANDS = frozenset({"check", "hours", "compare", "precedents"})
HELP_OPTIONS = frozenset({"--help", "-h"})


def wanted(command: str, args: Sequence[str]) -> bool:
    """Whether this invocation will embed a draft (asking for help does not)."""
    return command in EMBEDDING_COMMANDS and not HELP_OPTIONS.intersection(args)


class Preload:
    """The embedder, and then the saved index of ``index_dir``, read in a thread."""

    def __init__(self, embedder: Embedder, index_dir: Path) -> None:
        self.embedder = embedder
        self.index_dir = index_dir
        self._index: VectorIndex | None = None
        self._error: Exception | None = None
        self._done = threading.Event()
        # Not a daemon: a command that fails before it embeds waits for the
        # reads to end rather than leaving ONNX Runtime mid-read while the
        # interpreter shuts down.
        threading.Thread(target=self._run, name="sounding-preload", daemon=False).start()

    def _run(self) -> None:
        from models.errors import SoundingError

        try:
            # On failure the command's own first embedding loads again and reports it.
            with suppress(SoundingError):
                self.embedder.prepare()
            from models.index import VectorIndex

            self._index = VectorIndex.load(self.index_dir)
        except SoundingError as exc:  # no index yet, or a damaged one: the workspace decides
            self._error = exc
        finally:
            self._done.set()

    def saved_index(self) -> VectorIndex:
        """The index as ``VectorIndex.load`` gives it (or its error), once loaded."""
        self._done.wait()
        if self._error is not None:
            raise self._error
        assert self._index is not None
        return self._index


def start(home: str | None = None) -> Preload | None:
    """The data directory's embedder and saved index, already loading in a
    thread; None when there is nothing to load yet (no saved ONNX export,
    torch chosen) or ``SOUNDING_EMBED_PRELOAD`` is off, in which case the
    command loads, or exports, as it always does."""
    if home is not None:
        os.environ["SOUNDING_HOME"] = home  # as the root callback will, later
    from models.errors import SoundingError
    from service.settings import get_settings

    try:
        settings = get_settings()
    except SoundingError:
        return None  # the command itself says which setting is wrong
    if (
        not settings.embed_preload
        or settings.embed_backend == "torch"
        or not any(settings.embedding_dir.glob("onnx-*/export.json"))
    ):
        return None
    return Preload(settings.embedder(), settings.index_dir)
