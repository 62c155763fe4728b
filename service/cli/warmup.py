"""The embedding model loads while a forecasting command imports its code.

Before a draft can be embedded, a cold forecasting command spends about half
a second importing the store, the forecast and their schemas, and ONNX
Runtime spends a quarter of a second hashing and reading its 90 MB graph.
The second runs in C++ with the interpreter lock released, so on a machine
with two cores the two overlap: the model is read in a thread started before
the command's module is imported, and the command's first embedding waits
for it (``Embedder`` loads under its own lock).
"""

from __future__ import annotations

import os
import threading
from collections.abc import Sequence
from contextlib import suppress
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from models.embedding import Embedder

#: The commands that embed a draft on every run.
EMBEDDING_COMMANDS = frozenset({"check", "hours", "compare", "precedents"})
HELP_OPTIONS = frozenset({"--help", "-h"})


def wanted(command: str, args: Sequence[str]) -> bool:
    """Whether this invocation will embed a draft (asking for help does not)."""
    return command in EMBEDDING_COMMANDS and not HELP_OPTIONS.intersection(args)


def start(home: str | None = None) -> Embedder | None:
    """The data directory's embedder, already loading in a thread; None when
    there is nothing to load yet (no saved ONNX export, torch chosen) or
    ``SOUNDING_EMBED_PRELOAD`` is off, in which case the command loads, or
    exports, as it always does.

    The thread is not a daemon: a command that fails before it embeds
    waits for the load to end rather than leaving ONNX Runtime mid-read
    while the interpreter shuts down."""
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
    embedder = settings.embedder()
    threading.Thread(target=_load, args=(embedder,), name="sounding-embedder", daemon=False).start()
    return embedder


def _load(embedder: Embedder) -> None:
    from models.errors import SoundingError

    # On failure the command's own first embedding loads again and reports it.
    with suppress(SoundingError):
        embedder.prepare()
