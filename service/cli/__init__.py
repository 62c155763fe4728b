"""The ``sounding`` command line: a thin layer over the library.

Each command module registers its commands on ``app``. Expected failures
(subclasses of ``SoundingError``) become one-line messages and exit code 1;
only a bug shows a traceback.
"""

from __future__ import annotations

# Command modules register their commands on ``app`` when imported, in the
# order their commands appear in --help. Imported by name: a missing module
# fails here rather than silently dropping its commands.
from . import history, forecast, review, segments, admin  # noqa: F401, I001
from .base import app

COMMAND_MODULES = (history, forecast, review, segments, admin)


def main() -> None:
    app()


__all__ = ["app", "main"]
