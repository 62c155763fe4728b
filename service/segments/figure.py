"""The figure of one split: short unique names, drawn by models.plots."""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from models.errors import InputError
from models.figure_style import FORMATS
from models.plots import plot_segments
from service.segments.answer import SegmentResult
from service.segments.request import PHRASE_SEPARATOR, PLOT_NAME_CHARS


def render(result: SegmentResult, *, by: str | None = None, fmt: str = "png") -> bytes:
    """The figure of one split (the first one unless ``by`` names another)."""
    fmt = fmt.lower()
    if fmt not in FORMATS:
        raise InputError(f"figure format must be one of {', '.join(FORMATS)}", field="format", value=fmt)
    split = result.split(by) if by else result.splits[0]
    names = plot_names([seg.name for seg in split.segments])
    shown = split.model_copy(
        update={"segments": [seg.model_copy(update={"name": names[seg.name]}) for seg in split.segments]}
    )
    labels: np.ndarray | dict[str, np.ndarray]
    if isinstance(split.labels, Mapping):
        labels = {names[k]: v for k, v in split.labels.items()}
    else:
        labels = np.asarray([names[x] for x in split.labels], dtype=object)
    return plot_segments(shown, split.values, labels, metric=result.metric, fmt=fmt)


def plot_names(names: Sequence[str], width: int = PLOT_NAME_CHARS) -> dict[str, str]:
    """Short, unique figure labels: a topic of several phrases shows its
    first phrase and how many more ("flowers in bloom (+5)"); the full
    names stay in the JSON and the table."""
    out: dict[str, str] = {}
    for name in names:
        parts = name.split(f" {PHRASE_SEPARATOR} ")
        short = name if len(parts) == 1 else f"{parts[0]} (+{len(parts) - 1})"
        if len(short) > width:
            short = short[: width - 1].rstrip() + "…"
        base, i = short, 2
        while short in out.values():
            short, i = f"{base} #{i}", i + 1
        out[name] = short
    return out
