"""The team's own labels of posts (post_labels): kept at import from the
export's extra columns, read back to split the history on.

A label is a (name, value) pair of one post: the name is the export's column
(``campaign``), the value that row's cell. An empty cell is no label. An
import that names label columns replaces, for each post it holds, the labels
of those names and no others; an import that names none leaves every stored
label as it was.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence

from sqlalchemy import delete, func, insert, select
from sqlalchemy.orm import Session

from service.storage.engine import StoreBase
from service.storage.tables import PostLabel

_CHUNK = 900  # SQLite's variable limit

#: A post's labels as an import read them: every name asked for, with the
#: row's value or None for an empty cell.
Asked = Mapping[str, str | None]


def held(s: Session, pks: Sequence[int], names: Iterable[str]) -> dict[int, dict[str, str]]:
    """The stored labels of these names, by post row id (posts with none left out)."""
    wanted = list(dict.fromkeys(names))
    found: dict[int, dict[str, str]] = {}
    if not wanted:
        return found
    for i in range(0, len(pks), _CHUNK):
        rows = s.execute(
            select(PostLabel.post_pk, PostLabel.name, PostLabel.value).where(
                PostLabel.post_pk.in_(pks[i : i + _CHUNK]), PostLabel.name.in_(wanted)
            )
        )
        for pk, name, value in rows:
            found.setdefault(int(pk), {})[name] = value
    return found


def given(asked: Asked) -> dict[str, str]:
    """The labels a row gives: its non-empty cells."""
    return {name: value for name, value in asked.items() if value}


def replace(s: Session, changes: Sequence[tuple[int, Asked]]) -> None:
    """Set each post's labels of the names asked to what its row gave, in the
    caller's transaction."""
    by_names: dict[tuple[str, ...], list[int]] = {}
    for pk, asked in changes:
        by_names.setdefault(tuple(sorted(asked)), []).append(pk)
    for names, pks in by_names.items():
        for i in range(0, len(pks), _CHUNK):
            s.execute(
                delete(PostLabel).where(PostLabel.post_pk.in_(pks[i : i + _CHUNK]), PostLabel.name.in_(names))
            )
    rows = [{"post_pk": pk, "name": n, "value": v} for pk, asked in changes for n, v in given(asked).items()]
    if rows:
        s.execute(insert(PostLabel), rows)


def remove(s: Session, pks: Sequence[int]) -> None:
    """Every label of these posts (a forget)."""
    for i in range(0, len(pks), _CHUNK):
        s.execute(delete(PostLabel).where(PostLabel.post_pk.in_(pks[i : i + _CHUNK])))


class PostLabels(StoreBase):
    """A store's reads of the labels."""

    def label_names(self) -> dict[str, int]:
        """Each label name the store holds, with how many posts carry it."""
        with self.session() as s:
            rows = s.execute(
                select(PostLabel.name, func.count()).group_by(PostLabel.name).order_by(PostLabel.name)
            )
            return {str(name): int(n) for name, n in rows}

    def labels_of(self, name: str) -> dict[int, str]:
        """The value of label ``name`` of every post that has one, by post row id."""
        with self.session() as s:
            rows = s.execute(select(PostLabel.post_pk, PostLabel.value).where(PostLabel.name == name))
            return {int(pk): str(value) for pk, value in rows}
