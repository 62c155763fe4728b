"""The look every sounding figure shares, and turning a figure into bytes.

Figures are built with the object-oriented ``Figure`` API rather than pyplot,
so no figure is ever registered with pyplot's global manager: each one is freed
when it goes out of scope, nothing leaks between requests and no window can
open. The Agg backend is still selected (``agg``) for any code that imports pyplot.
"""

from __future__ import annotations

import io
from typing import TYPE_CHECKING

from models.errors import InputError

if TYPE_CHECKING:
    from matplotlib.figure import Figure

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

DPI = 110
WIDTH_IN = 11.0
FORMATS = ("png", "svg")

STYLE = {
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


def agg() -> None:
    """Select the off-screen backend. matplotlib is imported only when a
    figure is drawn: the command line's other commands never load it."""
    import matplotlib

    matplotlib.use("Agg")


def check_format(fmt: str) -> str:
    """``png`` or ``svg`` (any case); anything else is refused."""
    fmt = fmt.lower()
    if fmt not in FORMATS:
        raise InputError(f"format must be one of {', '.join(FORMATS)}", field="fmt", value=fmt)
    return fmt


def plain_number(x: float, _pos: int | None = None) -> str:
    """Tick labels people read without thinking, in the one style the import
    also reads: 1K, 25K, 1.2K, 1.2M, 0.03."""
    if x <= 0:
        return "0"
    for div, suffix in ((1e9, "B"), (1e6, "M"), (1e3, "K")):
        if x >= div:
            v = x / div
            return f"{v:.0f}{suffix}" if v >= 10 else f"{v:.2g}{suffix}"
    return f"{x:.3g}"


def figure_bytes(fig: Figure, fmt: str) -> bytes:
    """The figure as PNG or SVG bytes (SVG without a date, so renders compare
    equal); its artists are dropped afterwards."""
    buf = io.BytesIO()
    fig.savefig(
        buf, format=fmt, dpi=DPI, facecolor="white", metadata={"Date": None} if fmt == "svg" else None
    )
    data = buf.getvalue()
    fig.clear()  # drop artists now rather than waiting for the collector
    return data
