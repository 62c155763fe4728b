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
from service.cli.process_end import end_process

app.info.cls = LazyGroup
name_values(app)  # --home DIR, not --home <path>; each command gets its words when built


def main() -> None:
    """The ``sounding`` script: run one command, then end the process at once."""
    try:
        app()
    except SystemExit as exc:
        if exc.code is not None and not isinstance(exc.code, int):
            raise  # a message as the exit code: Python prints it and exits 1
        end_process(exc.code or 0)
    end_process(0)


__all__ = ["COMMAND_MODULES", "app", "main"]
