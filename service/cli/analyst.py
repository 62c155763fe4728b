"""The analyst's commands: how a metric is distributed over the posts, the
topics the history holds and their map (and, through ``segments --by
month|week``, how a metric moves over time)."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from datetime import datetime
from pathlib import Path

import typer
from pydantic import BaseModel
from rich.text import Text

from models.analyst_plots import check_format
from models.metrics import DEFAULT_METRIC
from models.segments import fmt_value
from service.analysis.distribution import DistributionAnswer, csv_table, distribution, render
from service.analysis.settled import LeftOut
from service.analysis.surprises import SurprisesAnswer, surprises
from service.analysis.surprises import csv_table as surprises_table
from service.analysis.surprises import render as render_surprises
from service.analysis.topics import TopicsAnswer, render_map, topic_map, topics
from service.analysis.topics import csv_table as topics_table
from service.analysis.trends import TrendAnswer, TrendRequest, trends
from service.analysis.trends import csv_table as trends_table
from service.analysis.trends import render as render_trends
from service.cli.base import app, err, out, print_json, workspace
from service.cli.render import Column, print_table
from service.cli.tables import write_csv
from service.clock import parse_since


def _plot_format(plot: Path | None) -> str | None:
    return None if plot is None else check_format(plot.suffix or "?")


Table = tuple[Sequence[str], Sequence[Sequence[str]]]


def emit(
    answer: BaseModel,
    *,
    as_json: bool,
    show: Callable[[], None],
    plot: Path | None,
    fmt: str | None,
    figure: Callable[[str], bytes],
    csv_path: Path | None,
    table: Callable[[], Table],
) -> None:
    """One answer as every analyst command gives it: JSON (``--json``) or the
    screen (``show``), then the figure (``--plot``, in ``fmt`` checked before
    the answer was computed) and the table (``--csv``). With --json the notes
    go to stderr, so stdout stays pure JSON."""
    if as_json:
        print_json(answer.model_dump(mode="json"))
    else:
        show()
    say = err if as_json else out
    if plot is not None and fmt is not None:
        plot.write_bytes(figure(fmt))
        say.print(f"figure written to {plot}", highlight=False)
    if csv_path is not None:
        write_csv(csv_path, *table())
        say.print(f"table written to {csv_path}", highlight=False)


def _no_followers(left: LeftOut) -> str:
    """The posts a per-follower metric leaves out, said on the screen."""
    n = left.no_followers
    return f" ({n:,} more left out: no follower count at their time)" if n else ""


def print_distribution(a: DistributionAnswer) -> None:
    m = a.metric
    s = a.summary
    who = f" from {a.account}" if a.account else ""
    out.print(f"{a.n_posts:,} settled posts with {m}{who}{_no_followers(a.left_out)}\n", highlight=False)
    print_table(
        out,
        [
            Column(header="median", right=True),
            Column(header="central half", right=True),
            Column(header="90th pct", right=True),
            Column(header="99th pct", right=True),
            Column(header="half the total from", right=True),
        ],
        [
            [
                fmt_value(s.median, m),
                f"{fmt_value(s.q1, m)}–{fmt_value(s.q3, m)}",
                fmt_value(s.p90, m),
                fmt_value(s.p99, m),
                f"top {100 * s.half_share:.0f}% of posts",
            ]
        ],
        title=f"{m}: summary",
    )
    peak = max((b.count for b in a.histogram), default=1) or 1
    for b in a.histogram:
        bar = "█" * round(30 * b.count / peak)
        out.print(f"  {fmt_value(b.low, m):>8}–{fmt_value(b.high, m):<8} {bar} {b.count}", highlight=False)
    if a.tail is not None:
        t = a.tail
        out.print(
            f"\n  the top {100 * t.tail_share:.0f}% of posts ({t.n_tail}, from "
            f"{fmt_value(t.xmin, m)} up) compared:",
            highlight=False,
        )
        for c in t.comparisons:
            word = f"{c.favoured} fits better" if c.favoured else "cannot tell apart"
            out.print(f"    {c.first} vs {c.second}: {word} (p = {c.p_value:.3f})", highlight=False)
    out.print()
    out.print(Text(a.reading))
    out.print(Text(a.note, style="dim"))


@app.command("distribution")
def distribution_cmd(
    metric: str = typer.Option(DEFAULT_METRIC.value, "--metric", help="impressions, engagements, likes, ..."),
    account: str | None = typer.Option(None, "--account", help="Only this account's posts."),
    since: str | None = typer.Option(None, "--since", help="Only posts from this date or time (ISO 8601)."),
    plot: Path | None = typer.Option(None, "--plot", help="Write the histogram (.png or .svg)."),
    csv_path: Path | None = typer.Option(None, "--csv", help="Write the histogram's table as CSV."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON (with the fits' statistics)."),
) -> None:
    """How a metric is spread over the posts, and which law its top follows."""
    fmt = _plot_format(plot)
    a = distribution(workspace(), metric=metric, account=account, since=parse_since(since))
    emit(
        a,
        as_json=as_json,
        show=lambda: print_distribution(a),
        plot=plot,
        fmt=fmt,
        figure=lambda f: render(a, f),
        csv_path=csv_path,
        table=lambda: csv_table(a),
    )


def print_trends(a: TrendAnswer, *, wide: bool = False) -> None:
    m = a.metric
    who = f" from {a.account}" if a.account else ""
    out.print(
        f"{a.n_posts:,} settled posts with {m}{who}, by {a.by}{_no_followers(a.left_out)}\n", highlight=False
    )
    for s in a.series:
        rows = [
            [
                r.period + (" (few posts)" if r.few_posts and r.n else ""),
                f"{r.n:,}",
                f"{100 * r.share:.0f}%",
                fmt_value(r.median, m) if r.median is not None else "-",
                "-" if r.ci_low is None else f"{fmt_value(r.ci_low, m)}–{fmt_value(r.ci_high, m)}",
            ]
            for r in s.rows
        ]
        print_table(
            out,
            [
                Column(header=a.by, free=True),
                Column(header="posts", right=True),
                Column(header="share", right=True),
                Column(header="median", right=True),
                Column(header="95% CI", right=True),
            ],
            rows,
            title=f"{s.name}: {m} by {a.by}",
            wide=wide,
        )
        trend = s.trend.reading if s.trend else "too few periods for a trend"
        out.print(Text(f"  {s.name}, last {a.last} {a.by}s: ", style="bold") + Text(trend))
        out.print()
    for w in a.warnings:
        out.print(Text("warning: ", style="yellow") + Text(w))
    out.print(Text(a.note, style="dim"))


def trends_cmd(
    req: TrendRequest, *, as_json: bool, plot: Path | None, csv_path: Path | None, wide: bool
) -> None:
    """``segments --by month|week``: the table, the figure and the CSV of a trend."""
    fmt = _plot_format(plot)
    a = trends(workspace(), req)
    emit(
        a,
        as_json=as_json,
        show=lambda: print_trends(a, wide=wide),
        plot=plot,
        fmt=fmt,
        figure=lambda f: render_trends(a, f),
        csv_path=csv_path,
        table=lambda: trends_table(a),
    )


def print_topics(a: TopicsAnswer, *, wide: bool = False) -> None:
    m = a.metric
    out.print(f"{a.n_posts:,} settled posts, {a.k} topics ({a.criterion})\n", highlight=False)
    rows = [
        [
            t.name + (" (few posts)" if t.too_small else ""),
            f"{t.n:,}",
            f"{100 * t.share:.0f}%",
            fmt_value(t.median, m),
            f"{fmt_value(t.ci_low, m)}–{fmt_value(t.ci_high, m)}",
            "-" if t.rank_biserial is None else f"{t.rank_biserial:+.2f}",
        ]
        for t in a.topics
    ]
    print_table(
        out,
        [
            Column(header="topic", free=True),
            Column(header="posts", right=True),
            Column(header="share", right=True),
            Column(header="median", right=True),
            Column(header="95% CI", right=True),
            Column(header="r", right=True),
        ],
        rows,
        title=f"topics found in the history, {m}",
        wide=wide,
    )
    for t in a.topics:
        out.print(Text(f"  {t.name}: ", style="bold") + Text(t.summary))
        for c in t.central:
            out.print(Text(f"    [{fmt_value(c.value, m)}] {c.text[:100]}", style="dim"))
    out.print(Text("\nEach name works as a phrase: sounding segments --topic 'NAME'.", style="dim"))
    out.print(Text(a.note, style="dim"))


@app.command("topics")
def topics_cmd(
    metric: str = typer.Option(DEFAULT_METRIC.value, "--metric", help="impressions, engagements, likes, ..."),
    account: str | None = typer.Option(None, "--account", help="Only this account's posts."),
    since: str | None = typer.Option(None, "--since", help="Only posts from this date or time (ISO 8601)."),
    plot: Path | None = typer.Option(None, "--plot", help="Write the map of the topics (.png or .svg)."),
    csv_path: Path | None = typer.Option(None, "--csv", help="Write one row per post with its topic."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON (with each topic's post ids)."),
    wide: bool = typer.Option(False, "--wide", help="Wrap topic names in full."),
) -> None:
    """The topics the history holds, found without phrases, with how each has done."""
    fmt = _plot_format(plot)
    ws = workspace()
    a = topics(ws, metric=metric, account=account, since=parse_since(since))
    emit(
        a,
        as_json=as_json,
        show=lambda: print_topics(a, wide=wide),
        plot=plot,
        fmt=fmt,
        figure=lambda f: render_map(
            topic_map(ws, metric=metric, account=account, since=parse_since(since)), f
        ),
        csv_path=csv_path,
        table=lambda: topics_table(a),
    )


@app.command("map")
def map_cmd(
    metric: str = typer.Option(DEFAULT_METRIC.value, "--metric", help="The metric that colours the posts."),
    account: str | None = typer.Option(None, "--account", help="Only this account's posts."),
    since: str | None = typer.Option(None, "--since", help="Only posts from this date or time (ISO 8601)."),
    plot: Path | None = typer.Option(None, "--plot", help="Write the map (.png or .svg)."),
    csv_path: Path | None = typer.Option(None, "--csv", help="Write each post's place on the map."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON (every post's place)."),
) -> None:
    """Where the posts lie in meaning: a 2-D projection coloured by the metric."""
    fmt = _plot_format(plot)
    m = topic_map(workspace(), metric=metric, account=account, since=parse_since(since))

    def show() -> None:
        out.print(f"{len(m.points):,} posts; {m.projection}", highlight=False)
        out.print(
            f"the two axes hold {100 * sum(m.explained):.0f}% of the vectors' variance", highlight=False
        )
        for name, (x, y) in m.centres.items():
            out.print(f"  {name}: centre at ({x:+.2f}, {y:+.2f})", highlight=False)
        out.print(Text(m.note, style="dim"))
        if plot is None:
            out.print("add --plot map.png (or .svg) for the picture", highlight=False)

    def table() -> Table:
        rows = [[p.post_id, p.topic, f"{p.x:.3f}", f"{p.y:.3f}", f"{p.value:.0f}"] for p in m.points]
        return ["post id", "topic", "x", "y", metric], rows

    emit(
        m,
        as_json=as_json,
        show=show,
        plot=plot,
        fmt=fmt,
        figure=lambda f: render_map(m, f),
        csv_path=csv_path,
        table=table,
    )


def print_surprises(a: SurprisesAnswer) -> None:
    m = a.metric
    out.print(
        f"{a.n_forecast:,} settled posts forecast out of sample, in time order; {a.outside:,} fell "
        f"outside their {100 * a.coverage:.0f}% interval\n",
        highlight=False,
    )
    for title, items in (
        ("did far better than forecast", a.better),
        ("did far worse than forecast", a.worse),
    ):
        rows = [
            [
                s.post_id,
                s.posted_at.date().isoformat() if isinstance(s.posted_at, datetime) else str(s.posted_at),
                fmt_value(s.outcome, m),
                f"{fmt_value(s.low, m)}–{fmt_value(s.high, m)}",
                f"×{s.factor:.2f}",
                s.text,
            ]
            for s in items
        ]
        print_table(
            out,
            [
                Column(header="post"),
                Column(header="posted"),
                Column(header=m, right=True),
                Column(header="interval", right=True),
                Column(header="beyond", right=True),
                Column(header="text", free=True),
            ],
            rows,
            title=title,
        )
        for s in items:
            out.print(Text(f"  {s.post_id}: ", style="bold") + Text("; ".join(s.moved)))
            for p in s.precedents:
                out.print(
                    Text(f"    {p.similarity:.2f} [{fmt_value(p.value, m)}] {p.text[:90]}", style="dim")
                )
        out.print()
    out.print(Text(a.note, style="dim"))


@app.command("surprises")
def surprises_cmd(
    metric: str = typer.Option(DEFAULT_METRIC.value, "--metric", help="impressions, engagements, likes, ..."),
    top: int = typer.Option(5, "--top", help="Posts shown each way (better, worse)."),
    plot: Path | None = typer.Option(None, "--plot", help="Write outcome against interval (.png or .svg)."),
    csv_path: Path | None = typer.Option(None, "--csv", help="Write the table as CSV."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON."),
) -> None:
    """Settled posts that did far better or worse than their out-of-sample forecast."""
    fmt = _plot_format(plot)
    a = surprises(workspace(), metric=metric, top=top)
    emit(
        a,
        as_json=as_json,
        show=lambda: print_surprises(a),
        plot=plot,
        fmt=fmt,
        figure=lambda f: render_surprises(a, f),
        csv_path=csv_path,
        table=lambda: surprises_table(a),
    )
