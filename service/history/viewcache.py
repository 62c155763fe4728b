"""The history view kept between commands, as memory-mapped numpy arrays.

Building a view reads every post from the store and types it with pandas:
most of a cold ``sounding check``. The view's arrays are saved in the data
directory (``views/METRIC/``) as ``.npy`` files, keyed by the store's change
counter and the metric, and a later process maps them (``np.load`` with
``mmap_mode="r"``) instead of rebuilding; only when the counter has moved
is the view built again. A kept view carries no texts: the few posts a
forecast shows (precedents, near-repeats) are read from the store by row id.

``meta.json`` is written last, through a rename, and names the counter the
arrays were written at, so a reader sees a whole view or none.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np

from models import features as F
from service.history.view import HistoryView
from service.settings import Settings
from service.storage.store import Store

FORMAT = 1
ARRAYS = ("pk", "time", "account", "log_target", "local_hours", "weekdays", "forms")
META = "meta.json"


def folder(settings: Settings, metric: str) -> Path:
    return settings.resolved_home / "views" / metric


def load(settings: Settings, store: Store, metric: str, stamp: int) -> HistoryView | None:
    """The kept view of ``metric`` at change counter ``stamp``, or None."""
    root = folder(settings, metric)
    try:
        meta = json.loads((root / META).read_text(encoding="utf-8"))
        if meta.get("format") != FORMAT or meta.get("stamp") != stamp or meta.get("metric") != metric:
            return None
        a = {name: np.load(root / f"{stamp}-{name}.npy", mmap_mode="r") for name in ARRAYS}
    except (OSError, ValueError):
        return None  # none kept, or replaced while read: build it instead
    n = len(a["pk"])
    history = F.History(
        pk=a["pk"],
        time=a["time"],
        account=a["account"],
        log_target=a["log_target"],
        vectors=np.zeros((n, 0), dtype=np.float32),
    )
    return HistoryView(
        metric,
        None,
        history,
        a["local_hours"],
        a["weekdays"],
        a["forms"],
        {str(k): int(v) for k, v in meta["account_codes"].items()},
        {int(k): str(v) for k, v in meta["zones"].items()},
        lookup=store.posts_by_pk,
    )


def save(settings: Settings, view: HistoryView, stamp: int) -> None:
    """Keep ``view`` for later processes; a data directory that cannot be
    written to (read-only) is left as it is."""
    root = folder(settings, view.metric)
    h = view.history
    arrays = {
        "pk": h.pk,
        "time": h.time,
        "account": h.account,
        "log_target": h.log_target,
        "local_hours": view.local_hours,
        "weekdays": view.weekdays,
        "forms": view.forms,
    }
    meta = {
        "format": FORMAT,
        "metric": view.metric,
        "stamp": stamp,
        "account_codes": view.account_codes,
        "zones": {str(k): v for k, v in view.zones.items()},
    }
    try:
        root.mkdir(parents=True, exist_ok=True)
        for name, arr in arrays.items():
            tmp = root / f"{stamp}-{name}.{os.getpid()}.tmp.npy"
            np.save(tmp, np.ascontiguousarray(arr))
            tmp.replace(root / f"{stamp}-{name}.npy")
        tmp = root / f"{META}.{os.getpid()}.tmp"
        tmp.write_text(json.dumps(meta), encoding="utf-8")
        tmp.replace(root / META)
        for old in root.glob("*.npy"):
            if not old.name.startswith(f"{stamp}-"):
                old.unlink(missing_ok=True)  # a reader that mapped it keeps its pages
    except OSError:
        return
