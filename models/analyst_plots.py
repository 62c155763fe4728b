"""Figures of the analyst's answers (distribution, trends, map), rendered
off-screen to PNG or SVG bytes. matplotlib is imported only when a figure
is drawn, so the command line starts without it."""

from __future__ import annotations

import io
import textwrap
from collections.abc import Sequence
from typing import Any

import numpy as np

from models.errors import InputError

FORMATS = ("png", "svg")
INK = "#2b3440"
TEAL = "#1f6f78"
AMBER = "#d08c2c"
PLUM = "#8a4f7d"
SLATE = "#4a5a6a"


def check_format(fmt: str) -> str:
    fmt = fmt.lower().lstrip(".")
    if fmt not in FORMATS:
        raise InputError(f"figure format must be one of {', '.join(FORMATS)}, not {fmt!r}", field="format")
    return fmt


def _figure(width: float, height: float) -> Any:
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    matplotlib.rcParams.update({"svg.fonttype": "none", "svg.hashsalt": "sounding"})
    return Figure(figsize=(width, height), dpi=110)


def _bytes(fig: Any, fmt: str) -> bytes:
    buf = io.BytesIO()
    fig.savefig(
        buf, format=check_format(fmt), bbox_inches="tight", metadata={"Date": None} if fmt == "svg" else None
    )
    return buf.getvalue()


def plot_histogram(
    lows: Sequence[float],
    highs: Sequence[float],
    counts: Sequence[int],
    marks: dict[str, float],
    *,
    metric: str,
    caption: str,
    fmt: str = "png",
) -> bytes:
    """Bars of equal width on a log axis, with the named quantiles marked."""
    fig = _figure(9.0, 4.2)
    ax = fig.add_subplot()
    lo, hi = np.asarray(lows, float), np.asarray(highs, float)
    ax.bar(lo, np.asarray(counts), width=hi - lo, align="edge", color=TEAL, edgecolor="white", linewidth=0.6)
    ax.set_xscale("log")
    colours = iter((AMBER, PLUM, SLATE, INK))
    for name, x in marks.items():
        if x > 0:
            ax.axvline(x, color=next(colours, INK), linestyle="--", linewidth=1.2, label=name)
    ax.set_xlabel(f"{metric} (log scale)")
    ax.set_ylabel("posts")
    ax.legend(frameon=False)
    ax.set_title("\n".join(textwrap.wrap(caption, 100)), fontsize=9, loc="left", color=INK)
    return _bytes(fig, fmt)


def plot_series(
    labels: Sequence[str],
    series: dict[str, tuple[Sequence[float], Sequence[float], Sequence[float]]],
    *,
    metric: str,
    caption: str,
    fmt: str = "png",
) -> bytes:
    """Median per period with its interval, one line per series, log axis."""
    fig = _figure(10.0, 4.4)
    ax = fig.add_subplot()
    xs = np.arange(len(labels))
    palette = iter((TEAL, AMBER, PLUM, SLATE, INK) * 4)
    for name, (med, low, high) in series.items():
        colour = next(palette)
        m = np.asarray(med, float)
        ax.plot(xs, m, marker="o", color=colour, label=name)
        ax.fill_between(xs, np.asarray(low, float), np.asarray(high, float), color=colour, alpha=0.15)
    # Symmetric log: like a log axis above 1, and a period whose median is 0
    # (or a series with no posts yet) still draws instead of failing.
    ax.set_yscale("symlog", linthresh=1.0)
    step = max(1, len(labels) // 12)
    ax.set_xticks(xs[::step], [labels[i] for i in range(0, len(labels), step)], rotation=45, ha="right")
    ax.set_ylabel(f"median {metric} (log scale)")
    ax.legend(frameon=False, fontsize=8)
    ax.set_title("\n".join(textwrap.wrap(caption, 100)), fontsize=9, loc="left", color=INK)
    return _bytes(fig, fmt)


def plot_intervals(
    names: Sequence[str],
    lows: Sequence[float],
    highs: Sequence[float],
    outcomes: Sequence[float],
    *,
    metric: str,
    caption: str,
    fmt: str = "png",
) -> bytes:
    """One row per post: its forecast interval as a bar and its outcome as a dot."""
    fig = _figure(9.0, max(3.0, 0.4 * len(names) + 1.5))
    ax = fig.add_subplot()
    ys = np.arange(len(names))
    lo, hi = np.asarray(lows, float), np.asarray(highs, float)
    ax.barh(ys, hi - lo, left=lo, height=0.5, color=TEAL, alpha=0.35, label="forecast interval")
    ax.scatter(np.asarray(outcomes, float), ys, color=AMBER, zorder=3, label="outcome")
    ax.set_yticks(ys, list(names))
    ax.set_xscale("symlog", linthresh=1.0)  # outcomes and bounds of 0 happen (engagements)
    ax.invert_yaxis()
    ax.set_xlabel(f"{metric} (log scale)")
    ax.legend(frameon=False, fontsize=8)
    ax.set_title("\n".join(textwrap.wrap(caption, 100)), fontsize=9, loc="left", color=INK)
    return _bytes(fig, fmt)


def plot_map(
    x: np.ndarray,
    y: np.ndarray,
    colour: np.ndarray,
    names: Sequence[tuple[str, float, float]],
    *,
    metric: str,
    caption: str,
    fmt: str = "png",
) -> bytes:
    """Points coloured by log10 of the metric, topic names at their centres."""
    fig = _figure(8.0, 7.0)
    ax = fig.add_subplot()
    pts = ax.scatter(x, y, c=colour, s=9, cmap="viridis", alpha=0.8, linewidths=0)
    fig.colorbar(pts, ax=ax, label=f"log10({metric} + 1)")
    for name, cx, cy in names:
        ax.annotate(name, (cx, cy), ha="center", fontsize=8, color=INK, weight="bold")
    ax.set_xlabel("first principal component")
    ax.set_ylabel("second principal component")
    ax.set_title("\n".join(textwrap.wrap(caption, 100)), fontsize=9, loc="left", color=INK)
    return _bytes(fig, fmt)


__all__ = ["FORMATS", "check_format", "plot_histogram", "plot_intervals", "plot_map", "plot_series"]
