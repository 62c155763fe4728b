"""Which store change the saved index is in step with, kept beside it.

Before an index read from disk is used, it is compared with the store: every
post's (row id, vector key) pair is read and hashed, which at 100,000 posts
costs half a second of every cold command. The saved index is whole (its
files are checksummed, ``models.index``); what is not known without that
comparison is whether the store has moved since. So when an index is found
in step, the store's change counter at that moment, the index's fingerprint
and the store's URL (passwords hidden) are written to ``index/step.json``,
with the pairs' digests the index holds (``held.npy``, needed to catch it up
in place later). A later process whose store has the same counter and URL,
and whose index has that fingerprint, uses the index without reading the
pairs. The counter moves with every committed write to the history, by any
process; a restore removes the index directory, step file and all.
"""

from __future__ import annotations

import hashlib
import json
import os
from contextlib import suppress
from pathlib import Path

import numpy as np

from models.configfile import write_config

STEP_FILE = "step.json"
HELD_FILE = "held.npy"
FORMAT = 1


def _digest(held: np.ndarray) -> str:
    return hashlib.sha256(np.ascontiguousarray(held).tobytes()).hexdigest()


def save(
    directory: Path, *, stamp: int, store: str, fingerprint: str, held: tuple[np.ndarray, np.ndarray]
) -> None:
    """Record that the index in ``directory`` (of ``fingerprint``) holds
    ``held`` and is in step with ``store`` at change counter ``stamp``. The
    step file is replaced last; a directory that cannot be written to is
    left as it is."""
    both = np.vstack([held[0], held[1]]).astype(np.int64)
    step = {
        "format": FORMAT,
        "stamp": stamp,
        "store": store,
        "fingerprint": fingerprint,
        "held": _digest(both),
    }
    tmp = directory / f"{HELD_FILE}.{os.getpid()}.tmp.npy"
    try:
        np.save(tmp, both)
        tmp.replace(directory / HELD_FILE)
        write_config(directory, step, STEP_FILE, indent=None)  # last, through a rename
    except OSError:
        with suppress(OSError):  # a read-only directory refuses even this
            tmp.unlink(missing_ok=True)  # a full disk leaves no partial file behind


def load(
    directory: Path, *, stamp: int, store: str, fingerprint: str
) -> tuple[np.ndarray, np.ndarray] | None:
    """The (row ids, key digests) the index holds, when the step file says it
    is in step with ``store`` at ``stamp`` and has ``fingerprint``; None
    otherwise (the caller then compares the index with the store)."""
    try:
        step = json.loads((directory / STEP_FILE).read_text(encoding="utf-8"))
        if not isinstance(step, dict) or step.get("format") != FORMAT:
            return None
        if (step.get("stamp"), step.get("store"), step.get("fingerprint")) != (stamp, store, fingerprint):
            return None
        both = np.load(directory / HELD_FILE, allow_pickle=False)
    except (OSError, ValueError):
        return None
    if both.ndim != 2 or both.shape[0] != 2 or both.dtype != np.int64 or _digest(both) != step.get("held"):
        return None
    return both[0].copy(), both[1].copy()
