"""A topic x timing (or form) table of medians: one cell per pair of segments."""

from __future__ import annotations

import math
from collections.abc import Hashable, Sequence
from typing import Any

import numpy as np
import numpy.typing as npt
from pydantic import BaseModel, Field

from models.segments import DEFAULT_MIN_N, Num, as_labels, as_values, check_min_n, ordered_names

# --------------------------------------------------------------------------
# Two-way table


class TwoWayCell(BaseModel):
    row: str
    col: str
    n: int
    median: Num
    too_small: bool


class TwoWayTable(BaseModel):
    """Post count and median of the metric per (row, column) cell; cells
    with no posts have no median."""

    row_by: str = Field(description="What the rows split by (topic)")
    col_by: str = Field(description="What the columns split by")
    rows: list[str]
    cols: list[str]
    min_n: int
    cells: list[TwoWayCell] = Field(description="Row by row, each row's columns in order")

    def _grid(self, values: list[Any], dtype: type) -> np.ndarray:
        return np.asarray(values, dtype=dtype).reshape(len(self.rows), len(self.cols))

    @property
    def n(self) -> np.ndarray:
        """Post counts, shape (rows, cols)."""
        return self._grid([c.n for c in self.cells], np.int64)

    @property
    def median(self) -> np.ndarray:
        """Medians, shape (rows, cols); NaN for an empty cell."""
        return self._grid([math.nan if c.median is None else c.median for c in self.cells], np.float64)

    @property
    def too_small(self) -> np.ndarray:
        return self._grid([c.too_small for c in self.cells], np.bool_)


def two_way(
    values: npt.ArrayLike,
    row_labels: Sequence[Hashable] | np.ndarray,
    col_labels: Sequence[Hashable] | np.ndarray,
    *,
    row_by: str = "rows",
    col_by: str = "columns",
    min_n: int = DEFAULT_MIN_N,
    row_order: Sequence[str] | None = None,
    col_order: Sequence[str] | None = None,
) -> TwoWayTable:
    """Cross two splits, e.g. topic by hour bucket. Only counts and medians:
    with many small cells, per-cell tests would mostly be noise."""
    arr = as_values(values)
    rows = as_labels(row_labels, arr.size, "row_labels")
    cols = as_labels(col_labels, arr.size, "col_labels")
    check_min_n(min_n)
    row_names = ordered_names(rows, row_order)
    col_names = ordered_names(cols, col_order)
    cell_vals: dict[tuple[str, str], list[float]] = {}
    for v, r, c in zip(arr, rows, cols, strict=True):
        cell_vals.setdefault((r, c), []).append(float(v))
    cells = []
    for r in row_names:
        for c in col_names:
            vals = cell_vals.get((r, c), [])
            cells.append(
                TwoWayCell(
                    row=r,
                    col=c,
                    n=len(vals),
                    median=float(np.median(vals)) if vals else None,
                    too_small=len(vals) < min_n,
                )
            )
    return TwoWayTable(row_by=row_by, col_by=col_by, rows=row_names, cols=col_names, min_n=min_n, cells=cells)
