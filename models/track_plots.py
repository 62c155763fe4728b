"""Figures of the track record, rendered off-screen to PNG or SVG bytes.

Left: live coverage per month (dots, with their Wilson 95% intervals)
against the stated coverage (line). Right: each settled forecast's interval
and middle estimate against what happened, on log axes; intervals that
missed are drawn in the second colour. Same style and object-oriented
``Figure`` API as :mod:`models.plots` (no pyplot state).
"""

from __future__ import annotations

import io
from collections.abc import Mapping
from typing import Any

import matplotlib
import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter, LogLocator, PercentFormatter

from models.errors import InputError
from models.plots import _STYLE, DPI, FORMATS, GRID, INK, PALETTE, WIDTH_IN, _plain_number

HELD, MISSED = PALETTE[0], PALETTE[6]


def _coverage_panel(ax: Axes, months: list[Mapping[str, Any]]) -> None:
    shown = [m for m in months if m.get("settled")]
    if not shown:
        ax.text(
            0.5, 0.5, "no forecast settled yet", ha="center", va="center", transform=ax.transAxes, color=INK
        )
        ax.set_axis_off()
        return
    x = np.arange(len(shown))
    live = np.array([m["live_coverage"] for m in shown])
    ci = np.array([m["live_coverage_ci"] for m in shown])
    stated = np.array([m["stated_coverage"] for m in shown])
    ax.errorbar(
        x,
        live,
        yerr=[live - ci[:, 0], ci[:, 1] - live],
        fmt="o",
        color=HELD,
        ecolor=HELD,
        capsize=3,
        label="live coverage (Wilson 95% interval)",
    )
    ax.step(
        np.r_[x - 0.5, x[-1] + 0.5],
        np.r_[stated, stated[-1]],
        where="post",
        color=INK,
        linewidth=1.2,
        linestyle="--",
        label="stated coverage",
    )
    ax.set_xticks(x, [f"{m['month']}\n(n={m['settled']})" for m in shown])
    ax.set_ylim(0, 1.02)
    ax.yaxis.set_major_formatter(PercentFormatter(1.0))
    ax.grid(True, axis="y", color=GRID, linewidth=0.8)
    ax.set_axisbelow(True)
    ax.set_title("How often the intervals held, month by month", loc="left")
    ax.legend(loc="lower left", frameon=False)


def _outcome_panel(ax: Axes, points: list[Mapping[str, Any]], metric: str) -> None:
    if not points:
        ax.text(
            0.5, 0.5, "no forecast settled yet", ha="center", va="center", transform=ax.transAxes, color=INK
        )
        ax.set_axis_off()
        return
    floor = 1.0 if metric != "engagement_rate" else 1e-4
    out = np.maximum([p["outcome"] for p in points], floor)
    med = np.maximum([p["median"] for p in points], floor)
    lo = np.maximum([p["low"] for p in points], floor)
    hi = np.maximum([p["high"] for p in points], floor)
    held = np.array([bool(p["inside"]) for p in points])
    for mask, colour, label in ((held, HELD, "held"), (~held, MISSED, "missed")):
        if mask.any():
            ax.errorbar(
                out[mask],
                med[mask],
                yerr=[med[mask] - lo[mask], hi[mask] - med[mask]],
                fmt="o",
                color=colour,
                ecolor=colour,
                alpha=0.8,
                capsize=2,
                markersize=4,
                label=f"{label} ({int(mask.sum())})",
            )
    span = [min(out.min(), lo.min()) * 0.8, max(out.max(), hi.max()) * 1.25]
    ax.plot(span, span, color=INK, linewidth=0.9, linestyle=":", label="forecast = outcome")
    ax.set_xscale("log")
    ax.set_yscale("log")
    # After set_*scale, which installs its own formatters.
    for axis in (ax.xaxis, ax.yaxis):
        axis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
        axis.set_major_formatter(FuncFormatter(_plain_number))
        axis.set_minor_formatter(FuncFormatter(lambda *_: ""))
    ax.set_xlabel(f"{metric}: what happened")
    ax.set_ylabel(f"{metric}: middle estimate and interval")
    ax.grid(True, color=GRID, linewidth=0.8)
    ax.set_axisbelow(True)
    ax.set_title("Forecast against outcome", loc="left")
    ax.legend(loc="upper left", frameon=False)


def track_record_figure(report: Mapping[str, Any], *, fmt: str = "png") -> bytes:
    """PNG or SVG bytes of a track-record report (``service.track_record.report``)."""
    fmt = fmt.lower()
    if fmt not in FORMATS:
        raise InputError(f"format must be one of {', '.join(FORMATS)}", field="fmt", value=fmt)
    # matplotlib types rc keys as a closed Literal set; ours are valid rc names.
    with matplotlib.rc_context(_STYLE):  # type: ignore[arg-type]
        fig = Figure(figsize=(WIDTH_IN, 4.6), dpi=DPI, layout="constrained")
        left, right = fig.subplots(1, 2)
        _coverage_panel(left, list(report.get("months", [])))
        _outcome_panel(right, list(report.get("points", [])), str(report.get("metric", "")))
        o = report.get("overall", {})
        live = o.get("live_coverage")
        fig.suptitle(
            f"Track record of {report.get('metric')} forecasts: {o.get('settled', 0)} settled"
            + (
                ""
                if live is None
                else f", live coverage {live:.0%} against {o.get('stated_coverage', 0):.0%} stated"
            ),
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
    fig.clear()
    return data


__all__ = ["FORMATS", "track_record_figure"]
