"""Segment statistics: how a metric's distribution differs between groups of
posts (topics, hour buckets, length bands, has-link ...).

Everything here takes plain arrays and lists and returns pydantic models
that are the answers themselves: the API sends them as they are and the CLI
prints their ``model_dump(mode="json")``. Social-media counts are
heavy-tailed and full of ties, so every comparison is rank-based (medians,
Mann–Whitney U, Kruskal–Wallis) rather than built on means. This module
also holds the one reading of a segment in words (:func:`verdict`) and the
one way its numbers are written (:func:`fmt_value`, :func:`fmt_p`).

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
from typing import Annotated, Any

import numpy as np
import numpy.typing as npt
from pydantic import BaseModel, BeforeValidator, Field, computed_field
from scipy import stats

from models.errors import InputError
from models.metrics import Metric

#: Name of the catch-all topic segment; it is treated like any other.
OTHER = "other"

#: Default hour buckets (local time) and text-length bands (characters).
DEFAULT_HOUR_EDGES: tuple[int, ...] = (0, 6, 9, 12, 15, 18, 21, 24)
DEFAULT_LENGTH_EDGES: tuple[int, ...] = (0, 80, 160, 240, 10**9)

#: Defaults of a comparison: segments with fewer posts are flagged, the
#: median's bootstrap interval, and the level that steers the wording.
DEFAULT_MIN_N = 20
DEFAULT_CONFIDENCE = 0.95
DEFAULT_RESAMPLES = 2000
DEFAULT_ALPHA = 0.05

# An upper length edge this large means "no upper limit" in labels.
_OPEN_END = 10**9

# Resampling is done in blocks so that a long history (say 100k posts x 2000
# resamples) never allocates one giant index matrix.
_BOOTSTRAP_BLOCK_CELLS = 4_000_000


# --------------------------------------------------------------------------
# Parameter checks (each stated once; the use case calls these too)


def check_min_n(min_n: int) -> int:
    if isinstance(min_n, bool) or not isinstance(min_n, (int, np.integer)) or min_n < 1:
        raise InputError("min_n must be a whole number of at least 1", field="min_n", value=min_n)
    return int(min_n)


def check_confidence(confidence: float) -> float:
    if not 0.0 < confidence < 1.0:
        raise InputError("confidence must lie strictly between 0 and 1", field="confidence", value=confidence)
    return float(confidence)


def check_resamples(n_resamples: int) -> int:
    if n_resamples < 1:
        raise InputError("n_resamples must be at least 1", field="n_resamples", value=n_resamples)
    return int(n_resamples)


def check_alpha(alpha: float) -> float:
    if not 0.0 < alpha < 1.0:
        raise InputError("alpha must lie strictly between 0 and 1", field="alpha", value=alpha)
    return float(alpha)


def check_threshold(threshold: float) -> float:
    """A cosine similarity a post needs to join a topic."""
    if (
        isinstance(threshold, bool)
        or not isinstance(threshold, (int, float, np.integer, np.floating))
        or not -1.0 <= threshold <= 1.0
    ):
        raise InputError(
            "threshold is a cosine similarity and must lie in -1..1", field="threshold", value=threshold
        )
    return float(threshold)


def check_k(k: int) -> int:
    """How many posts a topic takes in top-k mode."""
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or k < 1:
        raise InputError("k must be a whole number of at least 1", field="k", value=k)
    return int(k)


def check_params(*, min_n: int, confidence: float, n_resamples: int, alpha: float) -> None:
    """The parameters of a comparison (:func:`compare_segments`)."""
    check_min_n(min_n)
    check_confidence(confidence)
    check_resamples(n_resamples)
    check_alpha(alpha)


# --------------------------------------------------------------------------
# Input helpers


def _finite_or_none(x: Any) -> Any:
    """NaN or an infinity (no test was run) becomes None, which JSON carries."""
    if isinstance(x, (int, float, np.integer, np.floating)) and not isinstance(x, bool):
        x = float(x)
        return x if math.isfinite(x) else None
    return x


#: A number that may be absent: None where no test was run (NaN on input).
Num = Annotated[float | None, BeforeValidator(_finite_or_none)]


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


# --------------------------------------------------------------------------
# Numbers and words for people (the CLI, the API and the page read these)


def fmt_value(x: float | None, metric: str | None = None) -> str:
    """A metric value as people read it: 2,310 impressions, 3.12% rate; 4.5
    for a small count; "-" when there is none."""
    if x is None or not math.isfinite(x):
        return "-"
    if metric == Metric.ENGAGEMENT_RATE:
        return f"{100 * x:.2f}%"
    # Thousands separators for big values (1.23e+03 is unfriendly), three
    # significant digits below.
    return f"{x:,.0f}" if abs(x) >= 100 else f"{x:.3g}"


def fmt_p(p: float | None) -> str:
    """A p-value: two significant digits, "< 0.001" below that."""
    if p is None or not math.isfinite(p):
        return "-"
    return "< 0.001" if p < 0.001 else f"{p:.2g}"


def verdict(seg: SegmentStats, *, metric: str | None, min_n: int, alpha: float) -> str:
    """The one reading of a segment against the rest: which way, by how
    much, how sure (or why nothing can be said)."""
    if seg.too_small:
        posts = "post" if seg.n == 1 else "posts"
        return f"too few posts to judge: only {seg.n} {posts} (fewer than {min_n})"
    numbers = f"median {fmt_value(seg.median, metric)} vs {fmt_value(seg.rest_median, metric)}"
    if seg.p_holm is None or seg.rank_biserial is None:
        return f"no test possible ({numbers}): the other posts are missing or all equal"
    p = fmt_p(seg.p_holm)
    stats_part = f"r = {seg.rank_biserial:+.2f}, Holm p {'' if p.startswith('<') else '= '}{p}"
    if seg.p_holm < alpha:
        way = "higher" if seg.rank_biserial > 0 else "lower"
        return f"{way} than the rest: {numbers}; {stats_part}"
    return f"no clear difference from the rest: {numbers}; {stats_part}"


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
    confidence: float = DEFAULT_CONFIDENCE,
    n_resamples: int = DEFAULT_RESAMPLES,
    seed: int | Sequence[int] = 0,
) -> tuple[float, float]:
    """Percentile-bootstrap confidence interval of the median.

    One value gives a zero-width interval at that value: there is nothing
    to resample, and the reading of the segment says it is too small anyway.
    """
    arr = _as_values(values)
    check_confidence(confidence)
    check_resamples(n_resamples)
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


class SegmentStats(BaseModel):
    """One segment against all other posts. Test fields are None where no
    test was run (fewer than 2 posts, or no other posts)."""

    name: str
    n: int
    median: float
    q1: float
    q3: float
    ci_low: float = Field(description="Bootstrap confidence interval of the median")
    ci_high: float
    u_statistic: Num = Field(default=None, description="Mann-Whitney U of the segment vs the rest")
    p_value: Num = None
    p_holm: Num = Field(default=None, description="Holm-adjusted across the split's segments")
    rank_biserial: Num = Field(default=None, description="+1: every post beats every other post")
    too_small: bool
    rest_median: Num = Field(description="Median of the posts outside the segment")
    summary: str = Field(default="", description="The segment against the rest, in one line")

    @computed_field(description="The same reading as summary (its earlier name)")  # type: ignore[prop-decorator]
    @property
    def note(self) -> str:
        return self.summary


class SegmentReport(BaseModel):
    """All segments of one split, plus the omnibus Kruskal–Wallis test."""

    segments: Sequence[SegmentStats]
    kruskal_h: Num = Field(description="Kruskal-Wallis H across segments (none when segments overlap)")
    kruskal_p: Num
    overall_median: float
    n_total: int
    confidence: float
    min_n: int
    alpha: float
    overlapping: bool = Field(default=False, description="True when a post may sit in several segments")

    def segment(self, name: str) -> SegmentStats:
        for seg in self.segments:
            if seg.name == name:
                return seg
        raise KeyError(name)


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
    metric: str | None,
) -> SegmentReport:
    """Shared core: ``groups`` are (name, index array) pairs into ``arr``."""
    found: list[dict[str, Any]] = []
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
        u = p = r = math.nan
        if seg_vals.size >= 2 and rest.size >= 1:
            res = stats.mannwhitneyu(seg_vals, rest, alternative="two-sided", method="auto")
            u = float(res.statistic)  # U1: the segment's U
            p = float(res.pvalue)
            r = 2.0 * u / (seg_vals.size * rest.size) - 1.0
        found.append(
            {
                "name": name,
                "n": int(seg_vals.size),
                "median": float(med),
                "q1": float(q1),
                "q3": float(q3),
                "ci_low": lo,
                "ci_high": hi,
                "u_statistic": u,
                "p_value": p,
                "rank_biserial": r,
                "too_small": bool(seg_vals.size < min_n),
                "rest_median": float(np.median(rest)) if rest.size else math.nan,
            }
        )

    pvals = np.array([f["p_value"] for f in found])
    # Two segments that split the posts: "A vs rest" and "B vs rest" are
    # the same single test, so there is nothing to correct for.
    adjusted = pvals if disjoint and len(found) == 2 else holm(pvals)
    segments = [SegmentStats(**f, p_holm=float(p_adj)) for f, p_adj in zip(found, adjusted, strict=True)]
    for seg in segments:
        seg.summary = verdict(seg, metric=metric, min_n=min_n, alpha=alpha)

    kh = kp = math.nan
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
    min_n: int = DEFAULT_MIN_N,
    confidence: float = DEFAULT_CONFIDENCE,
    n_resamples: int = DEFAULT_RESAMPLES,
    seed: int = 0,
    alpha: float = DEFAULT_ALPHA,
    order: Sequence[str] | None = None,
    metric: str | None = None,
) -> SegmentReport:
    """Compare each segment (one label per post) with all other posts.

    Segments come out alphabetically with "other" last unless ``order`` is
    given (e.g. ``hour_labels(edges)``). ``alpha`` only steers the wording
    of the readings, and ``metric`` how their numbers are written; the
    numbers are reported in full either way.
    """
    arr = _as_values(values)
    names = _as_labels(labels, arr.size)
    check_params(min_n=min_n, confidence=confidence, n_resamples=n_resamples, alpha=alpha)
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
        metric=metric,
    )


def compare_groups(
    values: npt.ArrayLike,
    groups: Mapping[str, Sequence[int] | np.ndarray],
    *,
    min_n: int = DEFAULT_MIN_N,
    confidence: float = DEFAULT_CONFIDENCE,
    n_resamples: int = DEFAULT_RESAMPLES,
    seed: int = 0,
    alpha: float = DEFAULT_ALPHA,
    metric: str | None = None,
) -> SegmentReport:
    """Like :func:`compare_segments` for groups that may overlap, such as
    each topic's nearest posts (name -> post indices). Each group is
    compared with the posts outside it. No Kruskal–Wallis test is given,
    because it needs every post in exactly one group."""
    arr = _as_values(values)
    check_params(min_n=min_n, confidence=confidence, n_resamples=n_resamples, alpha=alpha)
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
        metric=metric,
    )


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
    arr = _as_values(values)
    rows = _as_labels(row_labels, arr.size, "row_labels")
    cols = _as_labels(col_labels, arr.size, "col_labels")
    check_min_n(min_n)
    row_names = _ordered_names(rows, row_order)
    col_names = _ordered_names(cols, col_order)
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
