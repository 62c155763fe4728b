"""An artefact's JSON config, written last and through a rename.

Every artefact (embedder settings, index, forecasters) saves its files first
and its config last: a directory whose config is missing or half-written is
never taken for a whole artefact, and a reader never sees a torn config.
"""

from __future__ import annotations

import contextlib
import json
import os
from pathlib import Path
from typing import Any

CONFIG_FILE = "config.json"


def write_config(
    directory: str | os.PathLike[str],
    config: dict[str, Any],
    name: str = CONFIG_FILE,
    *,
    indent: int | None = 2,
) -> Path:
    """Write ``config`` as ``directory/name`` through a temporary file and a rename."""
    path = Path(directory) / name
    tmp = path.with_name(path.name + ".tmp")
    try:
        tmp.write_text(json.dumps(config, indent=indent, default=str), encoding="utf-8")
        os.replace(tmp, path)
    except BaseException:
        # A full disk leaves no half-written temporary file behind.
        with contextlib.suppress(OSError):
            tmp.unlink(missing_ok=True)
        raise
    return path
