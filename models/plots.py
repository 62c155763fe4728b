"""Figures of a segment split, rendered off-screen to PNG or SVG bytes.

The figure is built with the object-oriented ``Figure`` API rather than
pyplot, so no figure is ever registered with pyplot's global manager: each
one is freed when it goes out of scope, nothing leaks between requests and
no window can open. The Agg backend is still selected for any code that
does import pyplot in the same process.
"""

from __future__ import annotations

import io
from collections.abc import Hashable, Mapping, Sequence
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import numpy as np
import numpy.typing as npt
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter, LogLocator

from models.errors import InputError
from models.segments import SegmentReport, SegmentStats

#: Our palette: calm, distinguishable, and still readable in greyscale.
PALETTE: tuple[str, ...] = (
    "#1f6f78",  # deep teal
    "#d08c2c",  # amber
    "#4a5a6a",  # slate
    "#8a4f7d",  # plum
    "#6b8e3d",  # moss
    "#3f6fa6",  # steel blue
    "#b5523b",  # brick
    "#9c8a5a",  # sand
)
MUTED = "#a9b0b7"  # too-small segments: present but visibly not to be trusted
INK = "#2b3440"  # text and axes
GRID = "#e6e9ec"
_SMALL_DASHES: list[tuple[float, ...]] = [(3, 2), (1, 1.5), (6, 2, 1, 2), (4, 4)]

DPI = 110
WIDTH_IN = 11.0
FORMATS = ("png", "svg")

_STYLE = {
    "font.size": 10,
    "axes.titlesize": 11,
    "axes.labelsize": 10,
    "xtick.labelsize": 9,
    "ytick.labelsize": 9.5,
    "legend.fontsize": 9,
    "axes.edgecolor": INK,
    "axes.labelcolor": INK,
    "xtick.color": INK,
    "ytick.color": INK,
    "text.color": INK,
    "axes.spines.top": False,
    "axes.spines.right": False,
    # Keep SVG text as text, so names stay searchable and selectable.
    "svg.fonttype": "none",
    "svg.hashsalt": "sounding",  # stable element ids across renders
}


def figure_size(n_segments: int) -> tuple[float, float]:
    """Width and height in inches: taller for more segments, so each row
    of the interval chart keeps room for its label."""
    return WIDTH_IN, max(4.2, 1.9 + 0.36 * n_segments)


def _groups(
    values: np.ndarray, labels: Sequence[Hashable] | np.ndarray | Mapping[str, Sequence[int] | np.ndarray]
) -> dict[str, np.ndarray]:
    """Per-segment values, from one label per post or a name -> indices map
    (the overlapping groups of ``compare_groups``)."""
    if isinstance(labels, Mapping):
        return {str(k): values[np.asarray(v, dtype=np.int64)] for k, v in labels.items()}
    names = np.asarray([str(x) for x in labels], dtype=object)
    if names.size != values.size:
        raise InputError(
            f"labels has {names.size} entries but there are {values.size} values",
            field="labels",
        )
    return {str(n): values[names == n] for n in dict.fromkeys(names)}


def _floor(values: np.ndarray) -> float:
    """Where zeros go on the log axis: 1 for counts, else the smallest
    positive value (rates such as engagement_rate live below 1)."""
    positive = values[values > 0]
    if positive.size == 0:
        return 1.0
    return float(min(1.0, positive.min()))


def _plain_number(x: float, _pos: int | None = None) -> str:
    """Tick labels people read without thinking: 1k, 25k, 1.2M, 0.03."""
    if x <= 0:
        return "0"
    for div, suffix in ((1e9, "B"), (1e6, "M"), (1e3, "k")):
        if x >= div:
            return f"{x / div:.3g}{suffix}"
    return f"{x:.3g}"


def _log_axis(ax: Axes) -> None:
    ax.set_xscale("log")
    # 1-2-5 ticks: a narrow range of medians still gets several labels.
    ax.xaxis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
    ax.xaxis.set_major_formatter(FuncFormatter(_plain_number))
    ax.xaxis.set_minor_formatter(FuncFormatter(lambda *_: ""))
    ax.grid(True, axis="x", which="major", color=GRID, linewidth=0.8)
    ax.set_axisbelow(True)


def _ecdf_panel(
    ax: Axes,
    order: list[SegmentStats],
    groups: dict[str, np.ndarray],
    floor: float,
    colours: dict[str, str],
    metric: str,
) -> None:
    # Highest-median segment first in the legend, matching the right panel
    # read top to bottom.
    dashes = iter(_SMALL_DASHES * (len(order) // len(_SMALL_DASHES) + 1))
    for seg in reversed(order):
        vals = np.sort(np.maximum(groups[seg.name], floor))
        # Start from share 0 at the first value, so the first riser is drawn
        # and a one-post segment still shows up as a vertical line.
        xs = np.concatenate([vals[:1], vals])
        ys = np.concatenate([[0.0], np.arange(1, vals.size + 1) / vals.size])
        label = f"{seg.name} (n={seg.n})" + (", too few" if seg.too_small else "")
        ax.step(
            xs,
            ys,
            where="post",
            color=colours[seg.name],
            linewidth=1.1 if seg.too_small else 1.8,
            # Too-small segments share one grey; distinct dashes keep them apart.
            linestyle=(0, next(dashes)) if seg.too_small else "-",
            alpha=0.9,
            label=label,
        )
    _log_axis(ax)
    ax.set_ylim(0, 1.02)
    ax.set_ylabel("fraction of posts at or below")
    ax.set_xlabel(
        f"{metric} (log scale; values below {_plain_number(floor)} drawn at {_plain_number(floor)})"
    )
    ax.set_title("How each segment is spread", loc="left")
    ax.grid(True, axis="y", color=GRID, linewidth=0.8)
    # ECDFs climb from lower left to upper right, so the upper left corner
    # is the emptiest; a light frame keeps the text clear of any line.
    leg = ax.legend(
        loc="upper left", frameon=True, handlelength=1.6, borderaxespad=0.3, ncol=2 if len(order) > 8 else 1
    )
    leg.get_frame().set(facecolor="white", edgecolor="none", alpha=0.92)


def _interval_panel(
    ax: Axes,
    order: list[SegmentStats],
    report: SegmentReport,
    floor: float,
    colours: dict[str, str],
    metric: str,
) -> None:
    ys = np.arange(len(order))
    for y, seg in zip(ys, order, strict=True):
        lo, mid, hi = (max(v, floor) for v in (seg.ci_low, seg.median, seg.ci_high))
        colour = colours[seg.name]
        ax.plot(
            [lo, hi],
            [y, y],
            color=colour,
            linewidth=2.4 if not seg.too_small else 1.4,
            solid_capstyle="round",
            alpha=0.85,
        )
        ax.plot(
            [mid],
            [y],
            marker="o",
            markersize=8 if not seg.too_small else 7,
            markerfacecolor="white" if seg.too_small else colour,
            markeredgecolor=colour,
            markeredgewidth=1.6,
            linestyle="none",
            zorder=3,
        )
    overall = max(report.overall_median, floor)
    ax.axvline(overall, color=INK, linestyle=(0, (4, 3)), linewidth=1, alpha=0.7, zorder=1)
    ax.annotate(
        f"all posts: {_plain_number(overall)}",
        xy=(overall, 1.0),
        xycoords=("data", "axes fraction"),
        xytext=(4, -2),
        textcoords="offset points",
        va="top",
        fontsize=8.5,
        color=INK,
    )
    ax.set_yticks(ys)
    ax.set_yticklabels([f"{s.name}  n={s.n}" + ("  (too few)" if s.too_small else "") for s in order])
    for tick, seg in zip(ax.get_yticklabels(), order, strict=True):
        if seg.too_small:
            tick.set_color(MUTED)
    ax.set_ylim(-0.7, len(order) - 0.3)
    ax.tick_params(axis="y", length=0)
    ax.spines["left"].set_visible(False)
    _log_axis(ax)
    ax.set_xlabel(f"median {metric} (log scale)")
    ax.set_title("Median with its interval", loc="left")


def plot_segments(
    report: SegmentReport,
    values: npt.ArrayLike,
    labels: Sequence[Hashable] | np.ndarray | Mapping[str, Sequence[int] | np.ndarray],
    *,
    metric: str,
    path: Path | str | None = None,
    fmt: str = "png",
) -> bytes:
    """Two panels: per-segment ECDFs (left) and medians with bootstrap CIs
    (right), both on a log x-axis. Values below the floor (1 for counts,
    which covers zeros) are drawn at the floor, and the axis label says so;
    a plain log axis is kept rather than symlog because symlog's linear
    stretch near zero distorts exactly where small accounts live.

    Returns the PNG or SVG bytes and also writes them to ``path`` if given.
    """
    fmt = fmt.lower()
    if fmt not in FORMATS:
        raise InputError(f"format must be one of {', '.join(FORMATS)}", field="fmt", value=fmt)
    arr = np.asarray(values, dtype=float)
    if arr.ndim != 1 or arr.size != report.n_total:
        raise InputError("values do not match the report they are drawn with", field="values")
    if not np.isfinite(arr).all():
        raise InputError("values has non-finite entries", field="values")
    groups = _groups(arr, labels)
    missing = [s.name for s in report.segments if s.name not in groups]
    if missing:
        raise InputError(f"labels lack segment(s) {', '.join(missing)} from the report", field="labels")

    # Bottom to top by median, so the highest segment sits at the top.
    order = sorted(report.segments, key=lambda s: (s.median, s.name))
    trusted = [s for s in sorted(order, key=lambda s: -s.median) if not s.too_small]
    colours = {s.name: PALETTE[i % len(PALETTE)] for i, s in enumerate(trusted)}
    colours.update({s.name: MUTED for s in order if s.too_small})
    floor = _floor(arr)

    # matplotlib types rc keys as a closed Literal set; ours are valid rc names.
    with matplotlib.rc_context(_STYLE):  # type: ignore[arg-type]
        fig = Figure(figsize=figure_size(len(order)), dpi=DPI, layout="constrained")
        left, right = fig.subplots(1, 2, gridspec_kw={"width_ratios": [1.05, 1.0]})
        _ecdf_panel(left, order, groups, floor, colours, metric)
        _interval_panel(right, order, report, floor, colours, metric)
        pct = f"{100 * report.confidence:g}%"
        fig.suptitle(
            f"{metric} by segment: dots are medians, bars are bootstrap {pct} "
            f"confidence intervals of the median",
            x=0.01,
            ha="left",
            fontsize=12.5,
            fontweight="bold",
        )
        buf = io.BytesIO()
        fig.savefig(
            buf, format=fmt, dpi=DPI, facecolor="white", metadata={"Date": None} if fmt == "svg" else None
        )
    data = buf.getvalue()
    fig.clear()  # drop artists now rather than waiting for the collector
    if path is not None:
        Path(path).write_bytes(data)
    return data


__all__ = ["DPI", "FORMATS", "PALETTE", "figure_size", "plot_segments"]
