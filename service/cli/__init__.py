"""The ``sounding`` command line: a thin layer over the library.

Each command module registers its commands on ``app``. Expected failures
(subclasses of ``SoundingError``) become one-line messages and exit code 1;
only a bug shows a traceback.
"""

from __future__ import annotations

from service.cli.base import app

# Commands are listed from their modules' source and each module is imported
# only when one of its commands runs or shows its help (service/cli/lazy.py),
# so `sounding --help` loads none of the heavy libraries. The order of
# their commands in --help is lazy.COMMAND_MODULES.
from service.cli.lazy import COMMAND_MODULES, LazyGroup
from service.cli.metavars import name_values

app.info.cls = LazyGroup
name_values(app)  # --home DIR, not --home <path>; each command gets its words when built


def main() -> None:
    app()


__all__ = ["COMMAND_MODULES", "app", "main"]
