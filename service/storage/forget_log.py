"""The forget log: which posts and accounts were forgotten, and when.

Kept in the data directory beside the store, never inside it, so that a
restored backup (service.restore) can say which forgotten posts it brings
back and forget them again. It holds post ids and account handles only,
never a text, a metric or a vector: forgetting must not leave a copy of
what was forgotten. One JSON object per line, appended and flushed to disk
before the forget commits, so a forget the store kept is always logged.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

from service.clock import as_utc, now_utc

LOG_FILE = "forgotten.jsonl"


@dataclass(frozen=True, slots=True)
class Forgotten:
    """One forget: a whole account (``post_id`` None) or one post of it."""

    at: datetime
    account: str
    post_id: str | None


def log_path(home: Path) -> Path:
    return Path(home) / LOG_FILE


def append(home: Path, entries: list[Forgotten]) -> None:
    """Add ``entries`` to the log, on disk before returning."""
    if not entries:
        return
    lines = "".join(
        json.dumps(
            {"at": as_utc(e.at).isoformat(), "account": e.account, "post_id": e.post_id},
            ensure_ascii=False,
        )
        + "\n"
        for e in entries
    )
    fd = os.open(log_path(home), os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o600)
    try:
        os.write(fd, lines.encode("utf-8"))
        os.fsync(fd)
    finally:
        os.close(fd)


def read(home: Path) -> list[Forgotten]:
    """Every forget logged, oldest first; a line cut short by a crash is skipped."""
    try:
        raw = log_path(home).read_text(encoding="utf-8")
    except FileNotFoundError:
        return []
    out: list[Forgotten] = []
    for line in raw.splitlines():
        try:
            d = json.loads(line)
            out.append(
                Forgotten(at=datetime.fromisoformat(d["at"]), account=d["account"], post_id=d["post_id"])
            )
        except (ValueError, KeyError, TypeError):
            continue
    return out


def entries_for(
    rows: list[tuple[int, str, str, str, int]], account: tuple[int, str] | None
) -> list[Forgotten]:
    """Log entries for one ``Store.forget``: the account, or each post."""
    at = now_utc()
    if account is not None:
        return [Forgotten(at=at, account=account[1], post_id=None)]
    return [Forgotten(at=at, account=r[3], post_id=r[2]) for r in rows]
