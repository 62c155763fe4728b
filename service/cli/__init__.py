"""The ``sounding`` command line: a thin layer over the library.

Each command module registers its commands on ``app``. Expected failures
(subclasses of ``SoundingError``) become one-line messages and exit code 1;
only a bug shows a traceback.
"""

from __future__ import annotations

import importlib
import importlib.util

from .base import app

# Command modules, in the order their commands appear in --help.
for _name in ("history", "forecast", "review", "segments", "admin", "track"):
    if importlib.util.find_spec(f"{__name__}.{_name}") is not None:
        importlib.import_module(f"{__name__}.{_name}")


def main() -> None:
    app()


__all__ = ["app", "main"]
