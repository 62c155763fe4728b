"""Which segment a post falls in: a topic by similarity, an hour bucket of
local time, a band of text length."""

from __future__ import annotations

import itertools
from collections.abc import Sequence

import numpy as np
import numpy.typing as npt

from models.errors import InputError
from models.segments import check_threshold

#: Default hour buckets (local time) and text-length bands (characters).
DEFAULT_HOUR_EDGES: tuple[int, ...] = (0, 6, 9, 12, 15, 18, 21, 24)
DEFAULT_LENGTH_EDGES: tuple[int, ...] = (0, 80, 160, 240, 10**9)

# An upper length edge this large means "no upper limit" in labels.
OPEN_END = 10**9


# --------------------------------------------------------------------------
# Assignment of posts to topics


def assign_nearest(similarities: npt.ArrayLike, *, threshold: float) -> np.ndarray:
    """For each post (a row of cosine similarities, one column per topic),
    the index of its most similar topic, or -1 ("other") when even the best
    similarity is below ``threshold``. Ties go to the lower topic index."""
    check_threshold(threshold)
    # No cast: float32 similarities are compared as they come, so the
    # threshold means the same here as beside a search's scores.
    sims = np.asarray(similarities)
    if sims.ndim != 2 or sims.dtype.kind != "f":
        raise InputError(
            "similarities must be a 2-D array of numbers (one row per post)", field="similarities"
        )
    if sims.shape[1] == 0:
        raise InputError("there are no topics to assign posts to", field="similarities")
    if not np.isfinite(sims).all():
        raise InputError("similarities has non-finite entries", field="similarities")
    if sims.shape[0] == 0:
        return np.empty(0, dtype=np.int64)
    best: np.ndarray = np.argmax(sims, axis=1).astype(np.int64)
    best[sims[np.arange(sims.shape[0]), best] < threshold] = -1
    return best


# --------------------------------------------------------------------------
# Hour buckets and length bands


def _check_edges(edges: Sequence[float], what: str) -> np.ndarray:
    """The edges in increasing order: they may be given in any order, each once."""
    arr = np.asarray(edges, dtype=float)
    if arr.ndim != 1 or arr.size < 2:
        raise InputError(f"{what} needs at least two edges", field=what)
    if not np.isfinite(arr).all():
        raise InputError(f"{what} must be numbers", field=what)
    arr = np.sort(arr)
    if np.any(np.diff(arr) <= 0):
        raise InputError(f"{what} must be different numbers; one is given twice", field=what)
    return arr


def hour_labels(edges: Sequence[int] = DEFAULT_HOUR_EDGES) -> list[str]:
    """Labels of the hour buckets in clock order, e.g. "06–09"."""
    arr = _check_edges(edges, "hour edges")
    if arr[0] != 0 or arr[-1] != 24:
        raise InputError("hour edges must start at 0 and end at 24", field="hour edges")
    if np.any(arr != np.round(arr)):
        raise InputError("hour edges must be whole hours", field="hour edges")
    ints = arr.astype(int)
    return [f"{a:02d}–{b:02d}" for a, b in itertools.pairwise(ints)]


def bucket_hours(hours: npt.ArrayLike, edges: Sequence[int] = DEFAULT_HOUR_EDGES) -> np.ndarray:
    """The bucket label of each local hour (0 <= hour < 24; fractions such
    as 13.5 are fine). A bucket includes its lower edge, not its upper."""
    names = hour_labels(edges)
    edges = sorted(edges)
    arr = np.asarray(hours, dtype=float)
    if arr.ndim != 1:
        raise InputError("hours must be a flat list", field="hours")
    if arr.size and (not np.isfinite(arr).all() or arr.min() < 0 or arr.max() >= 24):
        raise InputError("hours must lie in 0..24 (24 itself is hour 0)", field="hours")
    idx = np.searchsorted(np.asarray(edges, dtype=float), arr, side="right") - 1
    return np.asarray(names, dtype=object)[idx]


def open_length_edges(edges: Sequence[int]) -> list[int]:
    """Length edges in increasing order, ending at the open end: a text at or
    past the last edge given falls in a last band "≥ that edge"."""
    arr = _check_edges(edges, "length edges")
    if arr[0] != 0 or np.any(arr != np.round(arr)) or arr[-1] > OPEN_END:
        raise InputError(
            f"length edges must be whole numbers from 0 to {OPEN_END}, one of them 0", field="length edges"
        )
    ints = [int(e) for e in arr]
    return ints if ints[-1] >= OPEN_END else [*ints, OPEN_END]


def length_labels(edges: Sequence[int] = DEFAULT_LENGTH_EDGES) -> list[str]:
    """Labels of the length bands in increasing order: "<80", "80–159", ...,
    and "≥240" for a last band whose upper edge is 10**9 or more."""
    ints = open_length_edges(edges)
    out = []
    for i, (a, b) in enumerate(itertools.pairwise(ints)):
        if i == 0:
            out.append(f"<{b}")
        elif b >= OPEN_END:
            out.append(f"≥{a}")
        else:
            out.append(f"{a}–{b - 1}")
    return out


def length_band(lengths: npt.ArrayLike, edges: Sequence[int] = DEFAULT_LENGTH_EDGES) -> np.ndarray:
    """The band label of each text length (a whole number of characters)."""
    names = length_labels(edges)
    ints = open_length_edges(edges)
    arr = np.asarray(lengths, dtype=float)
    if arr.ndim != 1:
        raise InputError("lengths must be a flat list", field="lengths")
    if arr.size and (
        not np.isfinite(arr).all() or np.any(arr != np.round(arr)) or arr.min() < 0 or arr.max() >= ints[-1]
    ):
        raise InputError(f"lengths must be whole numbers from 0 to below {ints[-1]}", field="lengths")
    idx = np.searchsorted(np.asarray(ints, dtype=float), arr, side="right") - 1
    return np.asarray(names, dtype=object)[idx]
