"""The segments command: how a metric differs between topics, hours, forms
and accounts, as a table with one plain reading per segment."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import typer
from rich.text import Text

from models.errors import InputError
from models.figure_style import FORMATS
from models.metrics import DEFAULT_METRIC
from models.segments import DEFAULT_MIN_N, OTHER, fmt_p, fmt_value, verdict_details
from service.analysis.trends import PERIODS, TrendRequest
from service.cli.analyst import trends_cmd
from service.cli.base import app, err, out, print_json, workspace
from service.cli.prose import say
from service.cli.render import Column, cut, interval_bar, print_table
from service.cli.tables import whole, write_csv
from service.clock import parse_since
from service.history.match_modes import Match
from service.segments.answer import Example, SegmentResult, Split
from service.segments.figure import render
from service.segments.request import (
    BY_CHOICES,
    DEFAULT_EXAMPLES,
    DEFAULT_K,
    DEFAULT_THRESHOLD,
    NOTE,
    TOPIC,
    SegmentRequest,
    parse_edges,
)
from service.segments.segmenting import segment

# Long (multi-phrase) topic names are shortened in tables only; the reading
# lines and the JSON keep them whole.
_NAME_WIDTH = 30
_ROW_WIDTH = 22


def _short(text: str, width: int) -> str:
    return text if len(text) <= width else text[: width - 1] + "…"


def print_split(split: Split, metric: str, *, wide: bool = False, details: bool = False) -> None:
    pct = f"{100 * split.confidence:g}%"
    cols = [
        Column(header="segment", free=True),
        Column(header="posts", right=True),
        Column(header="median", right=True),
        Column(header="middle half of posts", right=True),
        Column(header=f"median, {pct} sure", right=True),
    ]
    if details:  # the statistics by their published names
        cols += [Column(header="r", right=True), Column(header="Holm p", right=True)]
    rows = [
        [
            seg.name + (" (few posts)" if seg.too_small else ""),
            f"{seg.n:,}",
            fmt_value(seg.median, metric),
            f"{fmt_value(seg.q1, metric)}–{fmt_value(seg.q3, metric)}",
            f"{fmt_value(seg.ci_low, metric)}–{fmt_value(seg.ci_high, metric)}",
        ]
        + (
            ["-" if seg.rank_biserial is None else f"{seg.rank_biserial:+.2f}", fmt_p(seg.p_holm)]
            if details
            else []
        )
        for seg in split.segments
    ]
    print_table(out, cols, rows, title=f"{metric} by {split.title}", wide=wide)
    # Each segment's median (●) and its confidence interval (├─┤) on one log axis.
    if split.segments:
        lo = min(seg.ci_low for seg in split.segments)
        hi = max(seg.ci_high for seg in split.segments)
        room = max(out.width - 34, 10)
        for seg in split.segments:
            bar = interval_bar(
                seg.ci_low,
                seg.median,
                seg.ci_high,
                lo=lo,
                hi=hi,
                cells=min(room, 40),
            )
            out.print(
                f"  {cut(seg.name, 20):<20} {bar} {fmt_value(seg.median, metric):>8}",
                highlight=False,
                markup=False,
            )
    for seg in split.segments:
        extra = f" ({verdict_details(seg)})" if details and not seg.too_small else ""
        say(out, f"{seg.name}: {seg.summary}{extra}", indent="  ", hanging="    ")
    if split.kruskal_p is not None and split.kruskal_h is not None:
        differ = (
            "clearly different from each other"
            if split.kruskal_p < split.alpha
            else "not clearly different from each other: could be chance"
        )
        stats = ""
        if details:
            p = fmt_p(split.kruskal_p)
            stats = f" (Kruskal–Wallis H = {split.kruskal_h:,.1f}, p {'' if p.startswith('<') else '= '}{p})"
        say(out, f"across all segments: {differ}{stats}", indent="  ", hanging="    ")
    elif split.overlapping:
        out.print("  no test across all segments: in top-k mode they share posts", highlight=False)
    if split.by == TOPIC and any(seg.examples for seg in split.segments):
        out.print()
        say(out, f"what each phrase caught (most similar first; {metric} in brackets):", indent="  ")
        for seg in split.segments:
            caught = seg.examples or []
            if not caught:
                continue
            head = "closest posts left out" if seg.name == OTHER else _short(seg.name, 60)
            out.print(Text(f"  {head}", style="bold"))
            for e in caught:
                say(
                    out,
                    f"{e.similarity:.2f}  [{_example_value(e, metric)}]  {_short(e.text, 90)}",
                    indent="    ",
                    hanging="          ",
                )
    out.print()


def _example_value(e: Example, metric: str) -> str:
    # A reference post is a peer's: named, never measured.
    return f"reference: {e.account}" if e.reference else fmt_value(e.value, metric)


def print_two_way(result: SegmentResult) -> None:
    tw = result.two_way
    if tw is None:
        return
    rows_by, cols_by = tw.row_by, tw.col_by
    # One line per row: each cell is the median, with "*" where it rests on fewer
    # than min_n posts; the counts are in --json.
    rows = []
    for i, row in enumerate(tw.rows):
        cells = [row]
        for j in range(len(tw.cols)):
            n = int(tw.n[i, j])
            median = fmt_value(float(tw.median[i, j]), result.metric)
            cells.append("-" if n == 0 else median + ("*" if tw.too_small[i, j] else ""))
        rows.append(cells)
    print_table(
        out,
        [Column(header=rows_by, free=True), *(Column(header=c, right=True) for c in tw.cols)],
        rows,
        title=f"median {result.metric} by {rows_by} x {cols_by}; * fewer than {tw.min_n} posts",
    )
    out.print()


def _plot_paths(plot: Path, result: SegmentResult) -> list[tuple[Path, str]]:
    """The first split goes to ``plot``; a second one to ``<stem>-<by><suffix>``."""
    first, *rest = result.splits
    paths = [(plot, first.by)]
    # label:campaign names a file label-campaign: a colon is no file name on every system.
    paths += [(plot.with_name(f"{plot.stem}-{s.by.replace(':', '-')}{plot.suffix}"), s.by) for s in rest]
    return paths


@app.command("segments")
def segments_cmd(
    topic: list[str] | None = typer.Option(
        None,
        "--topic",
        help="A topic phrase such as 'flowers in bloom' (repeat for more). "
        "'a | b' is one topic with two phrases.",
    ),
    by: str | None = typer.Option(
        None,
        "--by",
        help=f"Split by {', '.join(BY_CHOICES)}; by label:NAME for a label kept at import "
        "(import --label NAME); or month, week for a trend over time.",
    ),
    metric: str = typer.Option(
        DEFAULT_METRIC.value,
        "--metric",
        help="impressions, engagements, likes, link_clicks, engagement_rate, ...",
    ),
    mode: str = typer.Option(
        "nearest",
        "--mode",
        help="nearest: each post joins its closest topic (else other); "
        "top-k: each topic takes its k closest posts.",
    ),
    match: Match = typer.Option(
        Match.MEANING,
        "--match",
        help="How a post joins a topic: by meaning (the phrase's embedding), by the words it shares "
        "with the phrase (hashtags, @mentions and numbers included; BM25) or both, fused by rank.",
    ),
    k: int = typer.Option(DEFAULT_K, "-k", "--count", help="Posts per topic in top-k mode."),
    threshold: float = typer.Option(
        DEFAULT_THRESHOLD,
        "--threshold",
        metavar="N",
        help="How close in meaning a post must be to a topic's phrase to join it, 0 to 1 "
        "(higher: fewer, closer posts).",
    ),
    hour_edges: str | None = typer.Option(
        None, "--hour-edges", help="Local hour bucket edges, e.g. 0,6,9,12,15,18,21,24."
    ),
    length_edges: str | None = typer.Option(
        None, "--length-edges", help="Text length band edges, e.g. 0,80,160,240,1000000000."
    ),
    account: str | None = typer.Option(None, "--account", help="Only this account's posts."),
    min_n: int = typer.Option(DEFAULT_MIN_N, "--min-posts", help="Flag segments with fewer posts."),
    examples: int = typer.Option(DEFAULT_EXAMPLES, "--examples", help="Example posts per topic."),
    plot: Path | None = typer.Option(None, "--plot", help="Write the figure (.png or .svg)."),
    csv_path: Path | None = typer.Option(None, "--csv", help="Write the table as CSV."),
    last: int = typer.Option(
        12, "--last", help="With --by month or week: fit the trend over this many periods."
    ),
    since: str | None = typer.Option(
        None, "--since", help="With --by month or week: only posts from this date or time."
    ),
    as_json: bool = typer.Option(False, "--json", help="Print JSON."),
    wide: bool = typer.Option(
        False, "--wide", help="Wrap segment names in full instead of cutting them to the terminal's width."
    ),
    details: bool = typer.Option(
        False, "--details", help="Also show the statistics by name (rank-biserial r, Holm p, Kruskal–Wallis)."
    ),
) -> None:
    """How a metric differs between topics (named by phrases), hours, forms or accounts,
    or (--by month, --by week) how it moves over time."""
    if by in PERIODS:
        if match is not Match.MEANING:
            raise InputError(
                "--match applies to topic segments; a trend over time matches topics by meaning",
                field="--match",
            )
        trend_req = TrendRequest(
            by=by,
            topics=list(topic or []),
            metric=metric,
            account=account,
            since=parse_since(since),
            last=last,
            min_n=min_n,
            threshold=threshold,
        )
        trends_cmd(trend_req, as_json=as_json, plot=plot, csv_path=csv_path, wide=wide)
        return
    fmt = None
    if plot is not None:
        fmt = plot.suffix.lower().lstrip(".")
        if fmt not in FORMATS:
            raise InputError(f"--plot must end in .png or .svg, not {plot.name!r}", field="--plot")
    kwargs: dict[str, Any] = {}
    if hour_edges is not None:
        kwargs["hour_edges"] = parse_edges(hour_edges, "--hour-edges")
    if length_edges is not None:
        kwargs["length_edges"] = parse_edges(length_edges, "--length-edges")
    req = SegmentRequest(
        topics=list(topic or []),
        by=by,
        metric=metric,
        mode=mode,
        match=match,
        k=k,
        threshold=threshold,
        account=account,
        min_n=min_n,
        examples=examples,
        **kwargs,
    )
    result = segment(workspace(), req)
    if as_json:
        print_json(result.model_dump(mode="json"))
    else:
        out.print(
            f"{result.n_posts:,} posts with {metric}" + (f" from {account}" if account else "") + "\n",
            highlight=False,
        )
        for split in result.splits:
            print_split(split, metric, wide=wide, details=details)
        print_two_way(result)
        for w in result.warnings:
            # Text, not markup: topic names are the user's and may hold brackets.
            say(out, f"warning: {w}", hanging="  ", style="yellow")
        say(out, NOTE, style="dim")
    if plot is not None and fmt is not None:
        note_to = err if as_json else out  # keep stdout pure JSON
        for path, split_by in _plot_paths(plot, result):
            path.write_bytes(render(result, by=split_by, fmt=fmt))
            note_to.print(f"figure of the {split_by} split written to {path}", highlight=False)
    if csv_path is not None:
        write_csv(csv_path, *segments_table(result))
        (err if as_json else out).print(f"table written to {csv_path}", highlight=False)


def segments_table(result: SegmentResult) -> tuple[list[str], list[list[str]]]:
    """Every split's segments as the screen shows them: whole numbers, plain headers."""
    rows = [
        [
            split.by,
            seg.name,
            str(seg.n),
            whole(seg.median),
            whole(seg.q1),
            whole(seg.q3),
            whole(seg.ci_low),
            whole(seg.ci_high),
            "" if seg.rank_biserial is None else f"{seg.rank_biserial:+.2f}",
            fmt_p(seg.p_holm),
            "yes" if seg.too_small else "no",
        ]
        for split in result.splits
        for seg in split.segments
    ]
    metric = result.metric
    headers = [
        "split",
        "segment",
        "posts",
        f"median {metric}",
        "middle half low",
        "middle half high",
        "interval low",
        "interval high",
        "effect (rank-biserial r)",
        "p-value (Holm)",
        "few posts",
    ]
    return headers, rows
