"""Tables and small charts that fit the terminal.

Every table the CLI prints goes through ``fit_table``: numbers and times keep
their full width and never wrap, and the one free-text column (a post's text,
a segment's name) is cut to the room that is left, with an ellipsis. With
``wide=True`` the free text wraps instead, for people who want to read it all;
the full text is always in ``--json``.

The charts are plain Unicode drawn into a fixed number of cells, so they need
no dependency and read the same in a terminal and in a CI log.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from rich import box
from rich.cells import cell_len
from rich.console import Console
from rich.table import Table
from rich.text import Text

ELLIPSIS = "…"
# Rich's SIMPLE_HEAD box puts one space of padding either side of each cell
# and a blank rule between columns: three cells of overhead per column.
_PAD = 3


@dataclass(frozen=True, slots=True, kw_only=True)
class Column:
    """One column of a table: its header, and whether it holds free text
    (which is cut to fit) or a value (which never wraps)."""

    header: str
    free: bool = False
    right: bool = False
    #: Left out, last first, when the free text would otherwise get too little room.
    optional: bool = False


#: Below this many cells for the free text, optional columns are left out
#: (30: enough of a post to tell two precedents apart at 80 columns).
MIN_FREE = 30


def cut(text: str, width: int) -> str:
    """``text`` on one line, at most ``width`` cells, ending in an ellipsis
    when it was cut."""
    one_line = Text(" ".join(text.split()))
    if width <= 0:
        return ""
    # Cells, not characters: an emoji takes two cells.
    one_line.truncate(width, overflow="ellipsis")
    return one_line.plain


def fit_table(
    columns: Sequence[Column],
    rows: Sequence[Sequence[str]],
    *,
    width: int,
    title: str | None = None,
    wide: bool = False,
) -> Table:
    """A rich table whose every row is one line at ``width`` cells (unless
    ``wide``, where free text wraps)."""
    columns, rows = _drop_optional(list(columns), [list(r) for r in rows], width)
    natural = [max([cell_len(c.header), *(cell_len(str(r[i])) for r in rows)]) for i, c in enumerate(columns)]
    fixed = sum(n + _PAD for n, c in zip(natural, columns, strict=True) if not c.free)
    free_cols = [i for i, c in enumerate(columns) if c.free]
    room = max(width - fixed - _PAD * len(free_cols) - 1, len(free_cols))
    share = room // len(free_cols) if free_cols else 0
    table = Table(title=title, title_justify="left", box=box.SIMPLE_HEAD, expand=False, pad_edge=True)
    for i, c in enumerate(columns):
        if c.free:
            w = min(natural[i], share) if not wide else share
            table.add_column(
                c.header, width=max(w, 1), no_wrap=not wide, overflow="fold" if wide else "ellipsis"
            )
        else:
            table.add_column(
                c.header, no_wrap=True, min_width=natural[i], justify="right" if c.right else "left"
            )
    for r in rows:
        cells = []
        for i, c in enumerate(columns):
            value = str(r[i])
            cells.append(Text(value if wide or not c.free else cut(value, share)))
        table.add_row(*cells)
    return table


def _room(columns: Sequence[Column], rows: Sequence[Sequence[str]], width: int) -> int:
    fixed = sum(
        max([cell_len(c.header), *(cell_len(str(r[i])) for r in rows)]) + _PAD
        for i, c in enumerate(columns)
        if not c.free
    )
    return width - fixed - _PAD * sum(c.free for c in columns) - 1


def _drop_optional(
    columns: list[Column], rows: list[list[str]], width: int
) -> tuple[list[Column], list[list[str]]]:
    """Leave out optional columns, last first, until the free text has room
    (or, in a table without free text, until the table fits)."""

    def short_of_room() -> bool:
        room = _room(columns, rows, width)
        return room < MIN_FREE if any(c.free for c in columns) else room < 0

    while short_of_room():
        optional = [i for i, c in enumerate(columns) if c.optional]
        if not optional:
            break
        i = optional[-1]
        columns = columns[:i] + columns[i + 1 :]
        rows = [r[:i] + r[i + 1 :] for r in rows]
    return columns, rows


def print_table(
    console: Console,
    columns: Sequence[Column],
    rows: Sequence[Sequence[str]],
    *,
    title: str | None = None,
    wide: bool = False,
) -> None:
    console.print(fit_table(columns, rows, width=console.width, title=title, wide=wide))


def interval_bar(
    low: float, median: float, high: float, *, lo: float, hi: float, cells: int = 24, log: bool = True
) -> str:
    """The interval low..high drawn as ``─`` with the median as ``●`` on an
    axis from ``lo`` to ``hi`` (log scale by default: reach is multiplicative)."""

    def pos(v: float) -> int:
        f = (lambda x: math.log1p(max(x, 0.0))) if log else (lambda x: x)
        a, b = f(lo), f(hi)
        t = 0.0 if b <= a else (f(v) - a) / (b - a)
        return min(max(round(t * (cells - 1)), 0), cells - 1)

    line = [" "] * cells
    a, m, b = pos(low), pos(median), pos(high)
    for i in range(a, b + 1):
        line[i] = "─"
    line[a], line[b] = "├", "┤"
    line[m] = "●"
    return "".join(line)


def level_bar(value: float, *, cells: int = 20) -> str:
    """A share in [0, 1] as a bar of full and partial blocks."""
    eighths = "▏▎▍▌▋▊▉█"
    v = min(max(value, 0.0), 1.0) * cells
    full = int(v)
    rest = round((v - full) * 8)
    bar = "█" * full + (eighths[rest - 1] if rest and full < cells else "")
    return bar.ljust(cells)


def typical_miss(mae_log: float) -> str:
    """MAE on the log scale read plainly: a typical forecast is off by a factor
    of exp(MAE), e.g. "×1.6"."""
    return f"×{math.exp(mae_log):.2f}"
