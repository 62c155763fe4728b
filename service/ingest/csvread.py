"""An RFC 4180 record reader that a damaged record cannot stop.

Python's csv module parses each record; this module decides where records
start. A record begins at a line start and ends at a line break outside
quotes (RFC 4180, section 2). When the csv module cannot read a record (a
stray or unclosed quote, a field over its size limit), the record is
reported with its first line and reading starts again at the next line
(a broken record's own continuation lines then either read as records or
are reported in turn), so one bad record costs that record, not the rest
of the file. A field over the size limit inside properly closed quotes is
skipped as a whole record: the quote count tells where it ends.

A record may span at most :data:`MAX_RECORD_LINES` physical lines: an
unclosed quote is given up on there rather than swallowing the file. If
:data:`MAX_BAD_IN_A_ROW` records in a row cannot be read, the rest of the
file is not CSV; reading stops and the lines left are counted as skipped.
"""

from __future__ import annotations

import csv
from collections import deque
from collections.abc import Iterator
from dataclasses import dataclass
from typing import TextIO

MAX_RECORD_LINES = 10_000
MAX_BAD_IN_A_ROW = 50
_TOO_LONG = "field larger than field limit"


@dataclass(frozen=True, slots=True)
class Record:
    line: int  # the record's first physical line, from 1
    fields: list[str]


@dataclass(frozen=True, slots=True)
class BadRecord:
    line: int
    reason: str


@dataclass(frozen=True, slots=True)
class Abandoned:
    """Reading stopped at ``line``: ``lines_left`` lines were not read."""

    line: int
    lines_left: int
    reason: str


class RecordReader:
    """Iterates :class:`Record` and :class:`BadRecord` items of an open text
    file (opened with ``newline=""``), then at most one :class:`Abandoned`."""

    def __init__(self, handle: TextIO) -> None:
        self._source = iter(handle)
        self._pending: deque[tuple[int, str]] = deque()  # lines to read again
        self._taken: list[tuple[int, str]] = []  # lines of the record in flight
        self._next_line = 1
        self._reader = csv.reader(self._lines(), strict=True)

    @property
    def line_num(self) -> int:
        """Physical lines read from the file so far."""
        return self._next_line - 1

    def _pull(self) -> tuple[int, str] | None:
        if self._pending:
            return self._pending.popleft()
        text = next(self._source, None)
        if text is None:
            return None
        self._next_line += 1
        return self._next_line - 1, text

    def _lines(self) -> Iterator[str]:
        while (item := self._pull()) is not None:
            self._taken.append(item)
            if len(self._taken) > MAX_RECORD_LINES:
                raise csv.Error(f"a quoted field runs past {MAX_RECORD_LINES} lines")
            yield item[1]

    def __iter__(self) -> Iterator[Record | BadRecord | Abandoned]:
        bad_in_a_row = 0
        while True:
            self._taken = []
            try:
                fields = next(self._reader)
            except StopIteration:
                if self._taken:  # end of file inside quotes
                    yield from self._recover("the file ends inside a quoted field")
                    continue
                return
            except csv.Error as exc:
                if not self._taken:  # pragma: no cover - csv errors follow a line read
                    return
                bad_in_a_row += 1
                if bad_in_a_row >= MAX_BAD_IN_A_ROW:
                    yield self._abandon(f"{MAX_BAD_IN_A_ROW} records in a row are not CSV")
                    return
                yield from self._recover(_reason(exc))
                continue
            bad_in_a_row = 0
            yield Record(line=self._taken[0][0], fields=fields)

    def _recover(self, reason: str) -> Iterator[BadRecord]:
        """Report the failed record and set reading up at the right line."""
        taken, first = self._taken, self._taken[0][0]
        # The csv module's reader starts afresh on its next record after an
        # error (CPython's Reader_iternext resets its parser), but it may
        # be mid-line: give it whole lines again through a new reader.
        self._reader = csv.reader(self._lines(), strict=True)
        if reason.startswith("a field is longer"):
            # The record may be well formed, only too long: read on to the
            # line where its quotes balance and skip it whole.
            end = _closing_line(taken)
            while end is None and len(taken) < MAX_RECORD_LINES:
                item = self._pull()
                if item is None:
                    break
                taken.append(item)
                end = _closing_line(taken)
            if end is not None:
                self._pending.extendleft(reversed(taken[end + 1 :]))
                yield BadRecord(first, reason)
                return
        self._pending.extendleft(reversed(taken[1:]))
        yield BadRecord(first, reason)

    def _abandon(self, reason: str) -> Abandoned:
        start = self._taken[0][0]
        left = len(self._taken) + len(self._pending)
        self._pending.clear()
        left += sum(1 for _ in self._source)
        return Abandoned(line=start, lines_left=left, reason=reason)


def _closing_line(taken: list[tuple[int, str]]) -> int | None:
    """Index of the line where the record begun at ``taken[0]`` ends when
    its quotes are balanced (RFC 4180: quotes inside a field are doubled, so
    an even count closes every quoted field), or None."""
    count = 0
    for i, (_, text) in enumerate(taken):
        count += text.count('"')
        if count % 2 == 0:
            return i
    return None


def _reason(exc: csv.Error) -> str:
    msg = str(exc)
    if msg.startswith(_TOO_LONG):
        return f"a field is longer than the limit of {csv.field_size_limit():,} characters"
    if "expected after" in msg:
        return f"a quote inside a quoted field is not doubled ({msg})"
    return f"not readable as CSV: {msg}"
