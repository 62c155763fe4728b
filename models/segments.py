"""Segment statistics: how a metric's distribution differs between groups of
posts (topics, hour buckets, length bands, has-link ...).

Everything here takes plain arrays and lists and returns dataclasses with a
``to_dict()`` that is ready for JSON. Social-media counts are heavy-tailed
and full of ties, so every comparison is rank-based (medians, Mann–Whitney
U, Kruskal–Wallis) rather than built on means.

Effect size. For a segment of ``n1`` posts against the ``n2`` other posts
we report the rank-biserial correlation in Kerby's (2014) simple-difference
form::

    r = 2 * U1 / (n1 * n2) - 1

where ``U1`` is the Mann–Whitney U of the *segment* (the number of
(segment, rest) pairs in which the segment's post is higher, ties counting
one half). ``r`` is +1 when every segment post beats every other post, -1
when it loses every pair, and 0 when it wins as often as it loses.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Hashable, Mapping, Sequence
from dataclasses import asdict, dataclass, field
from typing import Any, cast

import numpy as np
import numpy.typing as npt
from scipy import stats

from .errors import InputError

#: Name of the catch-all topic segment; it is treated like any other.
OTHER = "other"

#: Default hour buckets (local time) and text-length bands (characters).
DEFAULT_HOUR_EDGES: tuple[int, ...] = (0, 6, 9, 12, 15, 18, 21, 24)
DEFAULT_LENGTH_EDGES: tuple[int, ...] = (0, 80, 160, 240, 10**9)

# An upper length edge this large means "no upper limit" in labels.
_OPEN_END = 10**9

# Resampling is done in blocks so that a long history (say 100k posts x 2000
# resamples) never allocates one giant index matrix.
_BOOTSTRAP_BLOCK_CELLS = 4_000_000

_NORM_TOL = 1e-3  # float32 vectors that claim unit length are within this


# --------------------------------------------------------------------------
# Small helpers


def _clean(x: Any) -> Any:
    """JSON-ready scalar: numpy -> Python, NaN/inf -> None."""
    if isinstance(x, (np.integer,)):
        return int(x)
    if isinstance(x, (float, np.floating)):
        x = float(x)
        return x if math.isfinite(x) else None
    return x


def _as_values(values: npt.ArrayLike, what: str = "values") -> np.ndarray:
    """A finite, non-empty 1-D float array, or a clear InputError."""
    try:
        arr = np.asarray(values, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{what} must be numbers", field=what) from exc
    if arr.ndim != 1:
        raise InputError(f"{what} must be a flat list of numbers", field=what)
    if arr.size == 0:
        raise InputError(f"{what} is empty: there is nothing to compare", field=what)
    bad = ~np.isfinite(arr)
    if bad.any():
        first = int(np.flatnonzero(bad)[0])
        raise InputError(
            f"{what} has {int(bad.sum())} missing or non-finite value(s), first at position {first}",
            field=what,
            value=first,
        )
    return arr


def _as_labels(labels: Sequence[Hashable] | np.ndarray, n: int, what: str = "labels") -> list[str]:
    """Labels as strings, one per value. None is refused rather than turned
    into the string "None", which would hide a missing-data bug."""
    out = list(labels)
    if len(out) != n:
        raise InputError(
            f"{what} has {len(out)} entries but there are {n} values; they must match",
            field=what,
        )
    for i, lab in enumerate(out):
        if lab is None or (isinstance(lab, float) and math.isnan(lab)):
            raise InputError(f"{what} has a missing label at position {i}", field=what, value=i)
    return [str(lab) for lab in out]


def _ordered_names(names: Sequence[str], order: Sequence[str] | None) -> list[str]:
    """Segment order: the caller's, or alphabetical with "other" last."""
    present = set(names)
    if order is None:
        return sorted(present - {OTHER}) + ([OTHER] if OTHER in present else [])
    missing = present - set(order)
    if missing:
        raise InputError(f"order leaves out segment(s) {', '.join(sorted(missing))}", field="order")
    # Names in the order with no posts are skipped: a segment needs data.
    return [name for name in dict.fromkeys(order) if name in present]


def _check_unit_rows(vecs: np.ndarray, what: str) -> np.ndarray:
    arr = np.asarray(vecs, dtype=np.float32)
    if arr.ndim != 2:
        raise InputError(f"{what} must be a 2-D array (one vector per row)", field=what)
    if not np.isfinite(arr).all():
        raise InputError(f"{what} has non-finite entries", field=what)
    if arr.shape[0] and not np.allclose(np.linalg.norm(arr, axis=1), 1.0, atol=_NORM_TOL):
        # Dot products are only cosines for unit vectors; catching this here
        # beats silently wrong topic assignments.
        raise InputError(f"{what} must be L2-normalised (unit length rows)", field=what)
    return arr


def _similarities(post_vecs: np.ndarray, topic_vecs: np.ndarray) -> np.ndarray:
    posts = _check_unit_rows(post_vecs, "post_vecs")
    topics = _check_unit_rows(topic_vecs, "topic_vecs")
    if topics.shape[0] == 0:
        raise InputError("there are no topics to assign posts to", field="topic_vecs")
    if posts.shape[1] != topics.shape[1]:
        raise InputError(
            f"post vectors have {posts.shape[1]} dimensions but topic vectors have {topics.shape[1]}",
            field="topic_vecs",
        )
    return cast(np.ndarray, posts @ topics.T)  # cosine similarity, as rows are unit length


# --------------------------------------------------------------------------
# Assignment of posts to segments


def assign_nearest_topic(post_vecs: np.ndarray, topic_vecs: np.ndarray, *, threshold: float) -> np.ndarray:
    """For each post, the index of its most similar topic, or -1 ("other")
    when even the best cosine similarity is below ``threshold``. Ties go to
    the lower topic index."""
    if not -1.0 <= threshold <= 1.0:
        raise InputError(
            "threshold is a cosine similarity and must lie in -1..1", field="threshold", value=threshold
        )
    sims = _similarities(post_vecs, topic_vecs)
    if sims.shape[0] == 0:
        return np.empty(0, dtype=np.int64)
    best = np.argmax(sims, axis=1).astype(np.int64)
    best[sims[np.arange(sims.shape[0]), best] < threshold] = -1
    return cast(np.ndarray, best)


def assign_top_k(post_vecs: np.ndarray, topic_vecs: np.ndarray, *, k: int) -> list[np.ndarray]:
    """For each topic, the indices of its ``k`` most similar posts, most
    similar first (ties: lower post index first). A post may belong to
    several topics. With fewer than ``k`` posts every post is returned,
    because a small history is normal, not an error."""
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or k < 1:
        raise InputError("k must be a whole number of at least 1", field="k", value=k)
    sims = _similarities(post_vecs, topic_vecs)
    # Stable sort of the negated similarity keeps ties in post order.
    order = np.argsort(-sims, axis=0, kind="stable")[: int(k)]
    return [order[:, t].astype(np.int64) for t in range(sims.shape[1])]


def _check_edges(edges: Sequence[float], what: str) -> np.ndarray:
    arr = np.asarray(edges, dtype=float)
    if arr.ndim != 1 or arr.size < 2:
        raise InputError(f"{what} needs at least two edges", field=what)
    if not np.isfinite(arr).all() or np.any(np.diff(arr) <= 0):
        raise InputError(f"{what} must be strictly increasing numbers", field=what)
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
    arr = np.asarray(hours, dtype=float)
    if arr.ndim != 1:
        raise InputError("hours must be a flat list", field="hours")
    if arr.size and (not np.isfinite(arr).all() or arr.min() < 0 or arr.max() >= 24):
        raise InputError("hours must lie in 0..24 (24 itself is hour 0)", field="hours")
    idx = np.searchsorted(np.asarray(edges, dtype=float), arr, side="right") - 1
    return np.asarray(names, dtype=object)[idx]


def length_labels(edges: Sequence[int] = DEFAULT_LENGTH_EDGES) -> list[str]:
    """Labels of the length bands in increasing order: "<80", "80–159", ...,
    and "≥240" for a last band whose upper edge is 10**9 or more."""
    arr = _check_edges(edges, "length edges")
    if arr[0] != 0 or np.any(arr != np.round(arr)):
        raise InputError("length edges must be whole numbers starting at 0", field="length edges")
    ints = [int(e) for e in arr]
    out = []
    for i, (a, b) in enumerate(itertools.pairwise(ints)):
        if i == 0:
            out.append(f"<{b}")
        elif b >= _OPEN_END:
            out.append(f"≥{a}")
        else:
            out.append(f"{a}–{b - 1}")
    return out


def length_band(lengths: npt.ArrayLike, edges: Sequence[int] = DEFAULT_LENGTH_EDGES) -> np.ndarray:
    """The band label of each text length (a whole number of characters)."""
    names = length_labels(edges)
    arr = np.asarray(lengths, dtype=float)
    if arr.ndim != 1:
        raise InputError("lengths must be a flat list", field="lengths")
    if arr.size and (
        not np.isfinite(arr).all() or np.any(arr != np.round(arr)) or arr.min() < 0 or arr.max() >= edges[-1]
    ):
        raise InputError(f"lengths must be whole numbers from 0 to below {edges[-1]}", field="lengths")
    idx = np.searchsorted(np.asarray(edges, dtype=float), arr, side="right") - 1
    return np.asarray(names, dtype=object)[idx]


# --------------------------------------------------------------------------
# Statistics


def bootstrap_median_ci(
    values: npt.ArrayLike,
    *,
    confidence: float = 0.95,
    n_resamples: int = 2000,
    seed: int | Sequence[int] = 0,
) -> tuple[float, float]:
    """Percentile-bootstrap confidence interval of the median.

    One value gives a zero-width interval at that value: there is nothing
    to resample, and the note on the segment says it is too small anyway.
    """
    arr = _as_values(values)
    if not 0.0 < confidence < 1.0:
        raise InputError("confidence must lie strictly between 0 and 1", field="confidence", value=confidence)
    if n_resamples < 1:
        raise InputError("n_resamples must be at least 1", field="n_resamples")
    n = arr.size
    if n == 1:
        return float(arr[0]), float(arr[0])
    rng = np.random.default_rng(seed)
    medians = np.empty(n_resamples)
    block = max(1, _BOOTSTRAP_BLOCK_CELLS // n)
    for start in range(0, n_resamples, block):
        stop = min(start + block, n_resamples)
        idx = rng.integers(0, n, size=(stop - start, n))
        medians[start:stop] = np.median(arr[idx], axis=1)
    alpha = 1.0 - confidence
    low, high = np.quantile(medians, [alpha / 2, 1.0 - alpha / 2])
    return float(low), float(high)


def holm(pvalues: npt.ArrayLike) -> np.ndarray:
    """Holm (1979) step-down adjusted p-values, in the input order.

    With the m p-values sorted ascending, p_(1) <= ... <= p_(m), the
    adjusted value is max over j <= i of min(1, (m - j + 1) * p_(j)); the
    running maximum keeps the adjustment monotone. NaN entries (tests not
    run) are left as NaN and do not count towards m.
    """
    p = np.asarray(pvalues, dtype=float)
    if p.ndim != 1:
        raise InputError("p-values must be a flat list", field="pvalues")
    finite = np.isfinite(p)
    if np.any((p[finite] < 0) | (p[finite] > 1)):
        raise InputError("p-values must lie in 0..1", field="pvalues")
    out = np.full(p.shape, np.nan)
    idx = np.flatnonzero(finite)
    m = idx.size
    if m == 0:
        return out
    order = idx[np.argsort(p[idx], kind="stable")]
    factors = m - np.arange(m)  # m, m-1, ..., 1
    adjusted = np.minimum(1.0, np.maximum.accumulate(factors * p[order]))
    out[order] = adjusted
    return out


@dataclass
class SegmentStats:
    """One segment against all other posts. Test fields are NaN where no
    test was run (fewer than 2 posts, or no other posts)."""

    name: str
    n: int
    median: float
    q1: float
    q3: float
    ci_low: float
    ci_high: float
    u_statistic: float = math.nan
    p_value: float = math.nan
    p_holm: float = math.nan
    rank_biserial: float = math.nan
    too_small: bool = False
    note: str = ""

    def to_dict(self) -> dict[str, Any]:
        return {k: _clean(v) for k, v in asdict(self).items()}


@dataclass
class SegmentReport:
    """All segments of one split, plus the omnibus Kruskal–Wallis test."""

    segments: list[SegmentStats]
    kruskal_h: float | None
    kruskal_p: float | None
    overall_median: float
    n_total: int
    confidence: float
    min_n: int
    alpha: float
    overlapping: bool = False  # True when a post may sit in several segments

    def segment(self, name: str) -> SegmentStats:
        for seg in self.segments:
            if seg.name == name:
                return seg
        raise KeyError(name)

    def to_dict(self) -> dict[str, Any]:
        return {
            "segments": [s.to_dict() for s in self.segments],
            "kruskal_h": _clean(self.kruskal_h),
            "kruskal_p": _clean(self.kruskal_p),
            "overall_median": _clean(self.overall_median),
            "n_total": self.n_total,
            "confidence": self.confidence,
            "min_n": self.min_n,
            "alpha": self.alpha,
            "overlapping": self.overlapping,
        }


def _fmt(x: float) -> str:
    """A number for a sentence: 1234.5 -> "1.23e+03" is unfriendly, so use
    thousands separators for big values and 3 significant digits below."""
    return f"{x:,.0f}" if abs(x) >= 100 else f"{x:.3g}"


def _note(seg: SegmentStats, rest_median: float, min_n: int, alpha: float) -> str:
    if seg.n < min_n:
        posts = "post" if seg.n == 1 else "posts"
        return f"only {seg.n} {posts}: too few to say anything"
    if not math.isfinite(seg.p_holm):
        return "no test possible: the other posts are missing or every value is the same"
    if seg.p_holm < alpha:
        way = "higher" if seg.rank_biserial > 0 else "lower"
        return (
            f"tends {way} than the other posts (median {_fmt(seg.median)} vs "
            f"{_fmt(rest_median)}); unlikely to be chance (Holm-adjusted p = {seg.p_holm:.2g})"
        )
    return (
        f"no clear difference from the other posts (median {_fmt(seg.median)} vs "
        f"{_fmt(rest_median)}, Holm-adjusted p = {seg.p_holm:.2g})"
    )


def _check_params(min_n: int, confidence: float, n_resamples: int, alpha: float) -> None:
    if min_n < 1:
        raise InputError("min_n must be at least 1", field="min_n", value=min_n)
    if not 0.0 < confidence < 1.0:
        raise InputError("confidence must lie strictly between 0 and 1", field="confidence")
    if n_resamples < 1:
        raise InputError("n_resamples must be at least 1", field="n_resamples")
    if not 0.0 < alpha < 1.0:
        raise InputError("alpha must lie strictly between 0 and 1", field="alpha")


def _compare(
    arr: np.ndarray,
    groups: list[tuple[str, np.ndarray]],
    *,
    disjoint: bool,
    min_n: int,
    confidence: float,
    n_resamples: int,
    seed: int,
    alpha: float,
) -> SegmentReport:
    """Shared core: ``groups`` are (name, index array) pairs into ``arr``."""
    segments: list[SegmentStats] = []
    rest_medians: list[float] = []
    for pos, (name, idx) in enumerate(groups):
        seg_vals = arr[idx]
        mask = np.ones(arr.size, dtype=bool)
        mask[idx] = False
        rest = arr[mask]
        q1, med, q3 = np.percentile(seg_vals, [25, 50, 75])
        # Each segment gets its own stream, so adding a segment elsewhere
        # does not move this one's interval.
        lo, hi = bootstrap_median_ci(
            seg_vals, confidence=confidence, n_resamples=n_resamples, seed=(seed, pos)
        )
        seg = SegmentStats(
            name=name,
            n=int(seg_vals.size),
            median=float(med),
            q1=float(q1),
            q3=float(q3),
            ci_low=lo,
            ci_high=hi,
            too_small=bool(seg_vals.size < min_n),
        )
        if seg_vals.size >= 2 and rest.size >= 1:
            res = stats.mannwhitneyu(seg_vals, rest, alternative="two-sided", method="auto")
            seg.u_statistic = float(res.statistic)  # U1: the segment's U
            seg.p_value = float(res.pvalue)
            seg.rank_biserial = 2.0 * seg.u_statistic / (seg_vals.size * rest.size) - 1.0
        segments.append(seg)
        rest_medians.append(float(np.median(rest)) if rest.size else math.nan)

    pvals = np.array([s.p_value for s in segments])
    # Two segments that split the posts: "A vs rest" and "B vs rest" are
    # the same single test, so there is nothing to correct for.
    adjusted = pvals if disjoint and len(segments) == 2 else holm(pvals)
    for seg, p_adj, rest_med in zip(segments, adjusted, rest_medians, strict=True):
        seg.p_holm = float(p_adj)
        seg.note = _note(seg, rest_med, min_n, alpha)

    kh: float | None = None
    kp: float | None = None
    testable = [arr[idx] for _, idx in groups if idx.size >= 2]
    # Kruskal–Wallis assumes each post is in one group only.
    if disjoint and len(testable) >= 2:
        with np.errstate(invalid="ignore", divide="ignore"):  # all-tied data -> NaN
            res = stats.kruskal(*testable)
        kh, kp = float(res.statistic), float(res.pvalue)

    return SegmentReport(
        segments=segments,
        kruskal_h=kh,
        kruskal_p=kp,
        overall_median=float(np.median(arr)),
        n_total=int(arr.size),
        confidence=confidence,
        min_n=min_n,
        alpha=alpha,
        overlapping=not disjoint,
    )


def compare_segments(
    values: npt.ArrayLike,
    labels: Sequence[Hashable] | np.ndarray,
    *,
    min_n: int = 20,
    confidence: float = 0.95,
    n_resamples: int = 2000,
    seed: int = 0,
    alpha: float = 0.05,
    order: Sequence[str] | None = None,
) -> SegmentReport:
    """Compare each segment (one label per post) with all other posts.

    Segments come out alphabetically with "other" last unless ``order`` is
    given (e.g. ``hour_labels(edges)``). ``alpha`` only steers the wording
    of the notes; the numbers are reported in full either way.
    """
    arr = _as_values(values)
    names = _as_labels(labels, arr.size)
    _check_params(min_n, confidence, n_resamples, alpha)
    ordered = _ordered_names(names, order)
    if len(ordered) < 2:
        raise InputError(
            f"only one segment ({ordered[0]!r}): a split needs at least two to compare",
            field="labels",
        )
    lab = np.asarray(names, dtype=object)
    groups = [(name, np.flatnonzero(lab == name)) for name in ordered]
    return _compare(
        arr,
        groups,
        disjoint=True,
        min_n=min_n,
        confidence=confidence,
        n_resamples=n_resamples,
        seed=seed,
        alpha=alpha,
    )


def compare_groups(
    values: npt.ArrayLike,
    groups: Mapping[str, Sequence[int] | np.ndarray],
    *,
    min_n: int = 20,
    confidence: float = 0.95,
    n_resamples: int = 2000,
    seed: int = 0,
    alpha: float = 0.05,
) -> SegmentReport:
    """Like :func:`compare_segments` for groups that may overlap, such as the
    output of :func:`assign_top_k` (name -> post indices). Each group is
    compared with the posts outside it. No Kruskal–Wallis test is given,
    because it needs every post in exactly one group."""
    arr = _as_values(values)
    _check_params(min_n, confidence, n_resamples, alpha)
    if len(groups) < 2:
        raise InputError("a split needs at least two groups to compare", field="groups")
    pairs: list[tuple[str, np.ndarray]] = []
    for name, members in groups.items():
        idx = np.unique(np.asarray(members, dtype=np.int64))
        if idx.size == 0:
            raise InputError(f"group {name!r} has no posts", field="groups")
        if idx[0] < 0 or idx[-1] >= arr.size:
            raise InputError(f"group {name!r} points past the {arr.size} values", field="groups")
        pairs.append((str(name), idx))
    return _compare(
        arr,
        pairs,
        disjoint=False,
        min_n=min_n,
        confidence=confidence,
        n_resamples=n_resamples,
        seed=seed,
        alpha=alpha,
    )


# --------------------------------------------------------------------------
# Two-way table


@dataclass
class TwoWayTable:
    """Post count and median of the metric per (row, column) cell; cells
    with no posts have median NaN."""

    rows: list[str]
    cols: list[str]
    n: np.ndarray  # int, shape (len(rows), len(cols))
    median: np.ndarray  # float, same shape
    min_n: int
    too_small: np.ndarray = field(init=False)

    def __post_init__(self) -> None:
        self.too_small = self.n < self.min_n

    def to_dict(self) -> dict[str, Any]:
        cells = [
            {
                "row": r,
                "col": c,
                "n": int(self.n[i, j]),
                "median": _clean(self.median[i, j]),
                "too_small": bool(self.too_small[i, j]),
            }
            for i, r in enumerate(self.rows)
            for j, c in enumerate(self.cols)
        ]
        return {"rows": self.rows, "cols": self.cols, "min_n": self.min_n, "cells": cells}


def two_way(
    values: npt.ArrayLike,
    row_labels: Sequence[Hashable] | np.ndarray,
    col_labels: Sequence[Hashable] | np.ndarray,
    *,
    min_n: int = 20,
    row_order: Sequence[str] | None = None,
    col_order: Sequence[str] | None = None,
) -> TwoWayTable:
    """Cross two splits, e.g. topic by hour bucket. Only counts and medians:
    with many small cells, per-cell tests would mostly be noise."""
    arr = _as_values(values)
    rows = _as_labels(row_labels, arr.size, "row_labels")
    cols = _as_labels(col_labels, arr.size, "col_labels")
    if min_n < 1:
        raise InputError("min_n must be at least 1", field="min_n", value=min_n)
    row_names = _ordered_names(rows, row_order)
    col_names = _ordered_names(cols, col_order)
    r_idx = {name: i for i, name in enumerate(row_names)}
    c_idx = {name: j for j, name in enumerate(col_names)}
    cell_vals: dict[tuple[int, int], list[float]] = {}
    for v, r, c in zip(arr, rows, cols, strict=True):
        cell_vals.setdefault((r_idx[r], c_idx[c]), []).append(float(v))
    n = np.zeros((len(row_names), len(col_names)), dtype=np.int64)
    med = np.full(n.shape, np.nan)
    for (i, j), vals in cell_vals.items():
        n[i, j] = len(vals)
        med[i, j] = float(np.median(vals))
    return TwoWayTable(rows=row_names, cols=col_names, n=n, median=med, min_n=min_n)
