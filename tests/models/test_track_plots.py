"""The track record's figure (models.track_plots): PNG and SVG bytes, and bad formats.

File signatures: PNG's 8-byte signature (RFC 2083, section 3.1); SVG is XML text
with an <svg> root (W3C SVG 1.1). Text stays text in our SVGs (svg.fonttype none).
"""

from __future__ import annotations

import pytest

from models.errors import InputError
from models.track_plots import track_record_figure

REPORT = {
    "metric": "impressions",
    "overall": {"settled": 3, "live_coverage": 2 / 3, "stated_coverage": 0.8},
    "months": [
        {
            "month": "2026-11",
            "settled": 1,
            "live_coverage": 1.0,
            "live_coverage_ci": [0.21, 1.0],
            "stated_coverage": 0.8,
        },
        {
            "month": "2026-12",
            "settled": 2,
            "live_coverage": 0.5,
            "live_coverage_ci": [0.09, 0.91],
            "stated_coverage": 0.8,
        },
    ],
    "points": [
        {"outcome": 900.0, "median": 1000.0, "low": 500.0, "high": 2000.0, "inside": True},
        {"outcome": 4000.0, "median": 1200.0, "low": 600.0, "high": 2500.0, "inside": False},
        {"outcome": 0.0, "median": 300.0, "low": 0.0, "high": 700.0, "inside": True},
    ],
}


def test_png_and_svg() -> None:
    png = track_record_figure(REPORT, fmt="png")
    assert png[:8] == b"\x89PNG\r\n\x1a\n"  # RFC 2083
    svg = track_record_figure(REPORT, fmt="svg").decode("utf-8")
    assert "<svg" in svg and "2026-12" in svg and "missed (1)" in svg and "held (2)" in svg


def test_empty_record_and_bad_format() -> None:
    empty = {
        "metric": "impressions",
        "overall": {"settled": 0, "live_coverage": None},
        "months": [],
        "points": [],
    }
    assert "no forecast settled yet" in track_record_figure(empty, fmt="svg").decode("utf-8")
    with pytest.raises(InputError):
        track_record_figure(REPORT, fmt="gif")
