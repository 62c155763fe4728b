"""The segment figure renders to valid PNG and SVG, even with tiny segments."""

from __future__ import annotations

import io
import xml.etree.ElementTree as ET
from pathlib import Path

import matplotlib.image as mpimg
import matplotlib.pyplot as plt
import numpy as np
import pytest

from models.errors import InputError
from models.figure_style import DPI
from models.plots import figure_size, plot_segments
from models.segments import compare_groups, compare_segments

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # source: PNG specification (RFC 2083), section 3.1


@pytest.fixture(scope="module")
def split() -> tuple[np.ndarray, list[str]]:
    rng = np.random.default_rng(3)
    sizes = {"product news": 50, "how-to threads": 35, "events": 6, "other": 40}
    values, labels = [], []
    for i, (name, n) in enumerate(sizes.items()):
        v = np.round(rng.lognormal(6 + 0.3 * i, 1.0, n))
        v[:2] = 0  # zeros must survive the log axis
        values += list(v)
        labels += [name] * n
    return np.asarray(values), labels


def test_png_signature_and_size(split: tuple[np.ndarray, list[str]], tmp_path: Path) -> None:
    values, labels = split
    report = compare_segments(values, labels, n_resamples=200)
    before = plt.get_fignums()
    out = tmp_path / "seg.png"
    data = plot_segments(report, values, labels, metric="impressions", path=out)
    assert data.startswith(PNG_SIGNATURE)
    assert out.read_bytes() == data
    img = mpimg.imread(io.BytesIO(data), format="png")
    # 4 segments -> the 4.2 in minimum height; width is fixed at 11 in.
    assert figure_size(4) == (11.0, 4.2)
    assert img.shape[:2] == (round(4.2 * DPI), round(11.0 * DPI))
    assert plt.get_fignums() == before  # no figure left open in pyplot
    # Not a blank canvas: a real drawing has many distinct colours.
    assert len(np.unique(img.reshape(-1, img.shape[-1]), axis=0)) > 50


def test_height_grows_with_segments() -> None:
    assert figure_size(20)[1] > figure_size(4)[1]


def test_svg_parses_and_names_segments(split: tuple[np.ndarray, list[str]]) -> None:
    values, labels = split
    report = compare_segments(values, labels, n_resamples=200)
    data = plot_segments(report, values, labels, metric="impressions", fmt="svg")
    root = ET.fromstring(data)
    assert root.tag.endswith("svg")
    text = " ".join(t for t in root.itertext())
    for name in set(labels):
        assert name in text
    assert "bootstrap 95%" in text
    assert "(too few)" in text  # "events" has 6 posts


def test_too_small_segments_still_render() -> None:
    values = [0.0, 5.0, 7.0, 100.0, 3.0]
    labels = ["tiny a", "tiny a", "tiny a", "tiny b", "tiny c"]
    report = compare_segments(values, labels, n_resamples=50)
    assert all(s.too_small for s in report.segments)
    svg = plot_segments(report, values, labels, metric="likes", fmt="svg").decode()
    for name in ("tiny a", "tiny b", "tiny c"):
        assert name in svg
    assert plot_segments(report, values, labels, metric="likes").startswith(PNG_SIGNATURE)


def test_rates_below_one_and_overlapping_groups() -> None:
    rng = np.random.default_rng(8)
    values = rng.beta(2, 60, 80)
    groups = {"launch": list(range(0, 50)), "tips": list(range(30, 80))}
    report = compare_groups(values, groups, n_resamples=100)
    svg = plot_segments(report, values, groups, metric="engagement_rate", fmt="svg").decode()
    assert "launch" in svg and "tips" in svg
    assert "values below 1" not in svg  # the floor follows the data, not 1


def test_bad_format_and_mismatch(split: tuple[np.ndarray, list[str]]) -> None:
    values, labels = split
    report = compare_segments(values, labels, n_resamples=50)
    with pytest.raises(InputError):
        plot_segments(report, values, labels, metric="impressions", fmt="jpg")
    with pytest.raises(InputError):
        plot_segments(report, values[:-1], labels[:-1], metric="impressions")


def test_tick_labels_use_the_one_number_style() -> None:
    from models.figure_style import plain_number

    # Worked by hand: thousands as K with two significant digits below ten of the unit,
    # whole units above (the style the import reads back, e.g. 1.2K; common practice, no source).
    assert [plain_number(x) for x in (0.03, 999, 1000, 1290, 25_000, 125_000, 1.2e6)] == [
        "0.03",
        "999",
        "1K",
        "1.3K",
        "25K",
        "125K",
        "1.2M",
    ]


def test_interval_and_trend_figures_draw_zero_counts() -> None:
    # Engagements of 0 (and bounds of 0) are common; a log axis cannot show them
    # and matplotlib refused to save such a figure (found by the API fuzz test).
    from models.analyst_plots import plot_intervals, plot_series

    png = plot_intervals(["a", "b"], [0.0, 0.0], [0.0, 3.0], [0.0, 0.0], metric="engagements", caption="x")
    assert png.startswith(b"\x89PNG\r\n\x1a\n")  # the PNG signature (PNG specification, section 5.2)
    png = plot_series(
        ["2026-01", "2026-02"],
        {"all": ([0.0, 0.0], [0.0, 0.0], [0.0, 0.0])},
        metric="engagements",
        caption="x",
    )
    assert png.startswith(b"\x89PNG\r\n\x1a\n")
