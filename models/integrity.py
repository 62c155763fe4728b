"""Checks that a saved artefact is whole before a native library reads it.

LightGBM, FAISS and ONNX Runtime parse their own files in C++, and some
damage ends the process there (LightGBM: "Model format error, expect a tree
here", then abort) or is read without complaint (a FAISS index answering
similarity 4.8e37). So every artefact records the SHA-256 of its files when
it is saved and is compared against them first; for files saved before
checksums, the file is parsed once in a child process, where a crash costs
only the child, and a self-search checks a FAISS index's vectors.

A file once hashed and found whole is not hashed again while the operating
system reports it unchanged (:class:`SeenHashes`): every cold command reads a
90 MB embedding graph, and at 100,000 posts a 150 MB index, and hashing them
was a tenth of a second of each ``check``.

Artefacts found damaged and rebuilt are noted in :data:`REPAIRED` for the
health answer.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import subprocess
import sys
import threading
import time
from pathlib import Path
from typing import Any

import numpy as np

from models.configfile import write_config

#: What was found damaged and rebuilt in this process, for ``GET /v1/health``.
REPAIRED: list[str] = []
_lock = threading.Lock()


def note_repair(what: str) -> None:
    with _lock:
        if what not in REPAIRED:
            REPAIRED.append(what)


def sha256_file(path: Path) -> str:
    h = hashlib.sha256()
    with Path(path).open("rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


#: Beside an artefact's files: the hashes already found whole, by file state.
SEEN_NAME = ".hashes-seen.json"
#: A file changed less than this long before it was hashed is hashed again
#: next time. File times advance in ticks of a few milliseconds, so a change
#: made within the tick of the hash could leave the same change time.
SETTLE_SECONDS = 2.0


def _state(st: os.stat_result) -> list[int]:
    # The change time moves on every write and every utime, and neither a
    # copy nor a replacement keeps the inode: a file with the same state is
    # the file that was hashed.
    return [st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns]


class SeenHashes:
    """Which files of ``directory`` were hashed and found whole, as they are now.

    :meth:`matches` hashes a file only when its state (device, inode, size,
    modification and change times) differs from when it last matched;
    :meth:`save` records the new matches beside the files (nothing is
    recorded in a read-only directory, which is then hashed every time).
    """

    def __init__(self, directory: Path) -> None:
        self.directory = Path(directory)
        try:
            seen = json.loads((self.directory / SEEN_NAME).read_text())
        except (OSError, ValueError):
            seen = {}
        self._seen: dict[str, Any] = seen if isinstance(seen, dict) else {}
        self._new = False

    def matches(self, name: str, sha256: object) -> bool:
        """Whether the file ``name`` has the SHA-256 ``sha256``."""
        path = self.directory / name
        st = path.stat()
        state = _state(st)
        if self._seen.get(name) == {"state": state, "sha256": sha256}:
            return True
        if sha256_file(path) != sha256:
            return False
        if time.time() - st.st_ctime > SETTLE_SECONDS:
            self._seen[name] = {"state": state, "sha256": sha256}
            self._new = True
        return True

    def save(self) -> None:
        if not self._new:
            return
        with contextlib.suppress(OSError):  # a read-only or full disk: hashed again next time
            write_config(self.directory, self._seen, SEEN_NAME, indent=None)
        self._new = False


def checksums(directory: Path, names: list[str]) -> dict[str, dict[str, Any]]:
    """Size and SHA-256 of the named files of ``directory``."""
    d = Path(directory)
    return {n: {"bytes": (d / n).stat().st_size, "sha256": sha256_file(d / n)} for n in names}


def mismatch(directory: Path, files: dict[str, Any]) -> str | None:
    """What differs between ``files`` (as :func:`checksums` wrote them) and
    the directory's files; None when every one matches."""
    d = Path(directory)
    seen = SeenHashes(d)
    for name, want in sorted(files.items()):
        try:
            size = (d / name).stat().st_size
        except OSError:
            return f"{name} is missing"
        if not isinstance(want, dict) or size != want.get("bytes"):
            said = want.get("bytes") if isinstance(want, dict) else "?"
            return f"{name} has {size} bytes, its config says {said}"
        if not seen.matches(name, want.get("sha256")):
            return f"{name} does not match its checksum"
    seen.save()
    return None


_PARSE = "import sys, lightgbm\nfor p in sys.argv[1:]:\n    lightgbm.Booster(model_file=p)\n"


def boosters_parse(paths: list[Path], *, timeout: float = 300) -> str | None:
    """Parse LightGBM text models in a child process; None when all load,
    else which one failed (the child may have been ended by LightGBM)."""
    for p in paths:
        try:
            done = subprocess.run(
                [sys.executable, "-c", _PARSE, str(p)],
                capture_output=True,
                timeout=timeout,
                check=False,
            )
        except (OSError, subprocess.TimeoutExpired) as exc:
            return f"{p.name} could not be checked ({exc})"
        if done.returncode != 0:
            said = (done.stderr or done.stdout).decode(errors="replace").strip().splitlines()
            return f"{p.name} is not a readable LightGBM model ({said[-1] if said else done.returncode})"
    return None


def self_search_problem(vectors: np.ndarray, sims: np.ndarray) -> str | None:
    """Whether stored vectors, searched for, find a neighbour with similarity
    about 1 (themselves: unit vectors, inner product is cosine); ``sims`` are
    the top answers' similarities for ``vectors``. None when they do."""
    if not len(vectors):
        return None
    if not np.all(np.isfinite(vectors)) or not np.all(np.isfinite(sims)):
        return "it holds values that are not numbers"
    norms = np.linalg.norm(vectors, axis=1)
    if np.max(np.abs(norms - 1.0)) > 1e-3:
        return f"its vectors are not unit length (norm up to {float(np.max(norms)):.3g})"
    top = sims[:, 0]
    if np.max(np.abs(top - 1.0)) > 1e-3:
        worst = float(top[np.argmax(np.abs(top - 1.0))])
        return f"a vector's nearest neighbour has similarity {worst:.3g}, not 1"
    return None
