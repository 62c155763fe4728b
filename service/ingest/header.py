"""The file's header beyond our own columns: its columns listed for a message,
and the label columns an import keeps (``--label``, service.storage.labels)."""

from __future__ import annotations

from models.errors import CSVFormatError
from service.storage.tables import LABEL_CHARS


class LabelTooLong(Exception):
    """A row's label cell past LABEL_CHARS: that row is rejected, naming the column."""

    def __init__(self, column: str, reason: str) -> None:
        super().__init__(reason)
        self.column, self.reason = column, reason


def listed_columns(header: list[str]) -> str:
    """A file's columns for a message: the first 50, or 'none'."""
    return (", ".join(header[:50]) + (" ..." if len(header) > 50 else "")) or "none"


def label_positions(header: list[str], names: tuple[str, ...], *, where: str) -> dict[str, int]:
    """Where each label column asked for is; a name the header lacks refuses the
    whole file, before anything is stored."""
    where_is = {h: i for i, h in enumerate(header)}
    missing = [n for n in names if n not in where_is]
    if missing:
        many = len(missing) > 1
        raise CSVFormatError(
            f"the label column{'s' if many else ''} {', '.join(map(repr, missing))} "
            f"{'are' if many else 'is'} not in the file (its columns: {listed_columns(header)})",
            where=where,
            field="label",
            value=missing[0],
            hint="name a column of the file's header as it is written there",
        )
    return {n: where_is[n] for n in names}


def read_labels(fields: list[str], positions: dict[str, int]) -> dict[str, str | None] | None:
    """A row's labels, None for an empty cell; None when no label was asked for."""
    if not positions:
        return None
    got: dict[str, str | None] = {}
    for name, i in positions.items():
        value = fields[i].strip()
        if len(value) > LABEL_CHARS:
            raise LabelTooLong(name, f"a label of {len(value)} characters; at most {LABEL_CHARS}")
        got[name] = value or None
    return got
