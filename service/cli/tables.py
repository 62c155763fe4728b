"""``--csv FILE``: a table written as the screen shows it (RFC 4180, plain
headers, whole numbers), shared by every command that prints one."""

from __future__ import annotations

import csv
from collections.abc import Sequence
from pathlib import Path

from models.errors import InputError


def write_csv(path: Path, headers: Sequence[str], rows: Sequence[Sequence[str]]) -> None:
    try:
        with path.open("w", newline="", encoding="utf-8") as fh:
            writer = csv.writer(fh, lineterminator="\r\n")  # RFC 4180 line ends
            writer.writerow(headers)
            writer.writerows(rows)
    except OSError as exc:
        raise InputError(f"cannot write {path}: {exc.strerror}", field="--csv", value=str(path)) from None


def whole(x: float | None) -> str:
    """A number as a whole number for a table ("" when missing)."""
    return "" if x is None or x != x else f"{x:.0f}"


def percent(x: float | None) -> str:
    return "" if x is None or x != x else f"{100 * x:.0f}%"
