"""The ``sounding`` command line: a thin layer over the library.

Each command module registers its commands on ``app``. Expected failures
(subclasses of ``SoundingError``) become one-line messages and exit code 1;
only a bug shows a traceback.
"""

from __future__ import annotations

# Command modules register their commands on ``app`` when imported. Imported
# by name: a missing module fails here rather than silently dropping its commands.
from service.cli import admin, forecast, history, mappings, model_export, review, segments, track
from service.cli.base import app

#: The order their commands appear in --help.
COMMAND_MODULES = (history, mappings, forecast, review, segments, admin, model_export, track)
_ORDER = {m.__name__: i for i, m in enumerate(COMMAND_MODULES)}
app.registered_commands.sort(key=lambda c: _ORDER.get(getattr(c.callback, "__module__", ""), len(_ORDER)))


def main() -> None:
    app()


__all__ = ["app", "main"]
