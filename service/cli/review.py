"""Commands for reviewing a draft before posting: hours, compare."""

from __future__ import annotations

import typer

from models.errors import InputError
from models.metrics import DEFAULT_COVERAGE, DEFAULT_METRIC, Metric
from service.cli.base import app, out, print_json, workspace
from service.cli.forecast import COVERAGE_HELP, METRIC_HELP, REPEATS_MATCH, planned
from service.cli.prose import plural, say
from service.cli.render import Column, interval_bar, print_table
from service.forecast.answer import CAUTION
from service.history.match_modes import Match
from service.review.hour_support import DEFAULT_MIN_POSTS, FEW_POSTS
from service.review.hours import HoursReport, best_hours, parse_day
from service.review.wordings import VariantsReport, compare_variants


def _value(v: float, metric: str) -> str:
    return f"{v:.2%}" if metric == Metric.ENGAGEMENT_RATE else f"{v:,.0f}"


def print_hours(r: HoursReport) -> None:
    week = r.mode == "week"
    span = r.first_day.isoformat() + (f" to {r.last_day.isoformat()}" if week else "")
    say(
        out,
        f"{r.metric} of this draft for {r.account}, hour by hour on {span} "
        f"({r.timezone}, {plural(len(r.slots), 'hour')}); {r.coverage:.0%} intervals, "
        f"{_held(r.backtested_coverage)}",
    )
    say(out, r.summary)
    if r.best_stays_best is not None:
        say(
            out,
            f"The best hour stays best in {r.best_stays_best:.0%} of refits of the timing "
            "effect on resampled history.",
        )
    lo = min(s.low for s in r.slots)
    hi = max(s.high for s in r.slots)
    cols = [
        Column(header="rank", right=True),
        Column(header="local time"),
        Column(header="low", right=True),
        Column(header="median", right=True),
        Column(header="high", right=True),
        # Every slot listed is tied with the best: the column goes first when room is short.
        Column(header="tied with the best", optional=True),
    ]
    print_table(
        out,
        cols,
        [
            [
                str(s.rank),
                s.label(with_day=week),
                _value(s.low, r.metric),
                _value(s.median, r.metric),
                _value(s.high, r.metric),
                "yes" if s.tied_with_best else "no",
            ]
            for s in r.best
        ],
        title="best hours" if r.told_apart else "highest medians (not told apart)",
    )
    if not week:
        # One line per hour: the interval as a bar, the median as a dot (log scale).
        out.print(
            f"every hour ({_value(lo, r.metric)} to {_value(hi, r.metric)}, log scale; "
            "● median, ├─┤ interval):"
        )
        for s in r.slots:
            mark = "=" if s.tied_with_best else "?" if s.few_posts else " "
            out.print(
                f"  {s.label():<20} {interval_bar(s.low, s.median, s.high, lo=lo, hi=hi)}"
                f" {_value(s.median, r.metric):>8} {mark}",
                highlight=False,
            )
        out.print("  = tied with the best", highlight=False)
        if any(s.few_posts for s in r.slots):
            say(out, f"? {FEW_POSTS}", indent="  ", hanging="    ")
    for w in r.warnings:
        say(out, f"warning: {w}", hanging="  ", style="yellow")
    say(out, CAUTION, style="dim")


def _held(backtested: float | None) -> str:
    """How often such intervals held, in words."""
    return "not yet tried on past posts" if backtested is None else f"held in {backtested:.0%} of past tries"


@app.command("hours")
def hours_cmd(
    text: str = typer.Argument(..., help="The draft."),
    account: str = typer.Option(..., "--account", help="Account that would post it."),
    day: str | None = typer.Option(
        None, "--day", help="Local day in the account's zone, YYYY-MM-DD (default: tomorrow)."
    ),
    week: bool = typer.Option(False, "--week", help="Seven days from --day, hour by hour."),
    metric: str = typer.Option(DEFAULT_METRIC.value, "--metric", help=METRIC_HELP),
    coverage: float = typer.Option(DEFAULT_COVERAGE, "--coverage", help=COVERAGE_HELP),
    top: int = typer.Option(3, "--top", metavar="N", help="How many of the best hours to list."),
    media: bool = typer.Option(False, "--media", help="An image or video goes with the text."),
    min_posts: int = typer.Option(
        DEFAULT_MIN_POSTS,
        "--min-posts",
        metavar="N",
        help="Hours (and, with --week, weekdays) with fewer of the account's posts are marked "
        "and never called best.",
    ),
    as_json: bool = typer.Option(False, "--json", help="Print JSON."),
    match: Match = REPEATS_MATCH,
) -> None:
    """Forecast a draft at every hour of a day (or a week) in the account's zone."""
    r = best_hours(
        workspace().forecaster,
        text,
        account=account,
        day=parse_day(day, where="--day") if day else None,
        week=week,
        metric=metric,
        coverage=coverage,
        top=top,
        has_media=media,
        min_posts=min_posts,
        match=match,
    )
    if as_json:
        print_json(r.model_dump(mode="json"))
    else:
        print_hours(r)


def print_variants(r: VariantsReport, *, wide: bool = False) -> None:
    say(
        out,
        f"{r.metric} of {len(r.variants)} versions compared for {r.account} at "
        f"{r.local_time}; {r.coverage:.0%} intervals, {_held(r.backtested_coverage)}",
    )
    say(out, r.summary)
    rows = []
    for v in r.variants:
        rows.append(
            [
                f"{v.rank}{' =' if v.tied_with_best else '  '}",
                f"#{v.index}",
                _value(v.median, r.metric),
                f"{_value(v.low, r.metric)}–{_value(v.high, r.metric)}",
                str(len(v.only_here)),
                v.text,
            ]
        )
    print_table(
        out,
        [
            Column(header="rank", right=True),
            Column(header="version"),
            Column(header="median", right=True),
            Column(header="interval", right=True),
            Column(header="own precedents", right=True, optional=True),
            Column(header="text", free=True),
        ],
        rows,
        wide=wide,
    )
    say(out, "= tied with the best; own precedents: precedents that only this version has", indent="  ")
    for v in r.variants:
        for w in v.warnings:
            say(out, f"warning (#{v.index}): {w}", hanging="  ", style="yellow")
    say(out, CAUTION, style="dim")


@app.command("compare")
def compare_cmd(
    texts: list[str] = typer.Argument(..., metavar="TEXT...", help="Two or more versions of the draft."),
    account: str = typer.Option(..., "--account", help="Account that would post them."),
    at: str | None = typer.Option(
        None, "--at", help="Planned time, ISO 8601 (no offset: the account's zone). Default: now."
    ),
    metric: str = typer.Option(DEFAULT_METRIC.value, "--metric", help=METRIC_HELP),
    coverage: float = typer.Option(DEFAULT_COVERAGE, "--coverage", help=COVERAGE_HELP),
    media: bool = typer.Option(False, "--media", help="An image or video goes with each version."),
    match: Match = REPEATS_MATCH,
    as_json: bool = typer.Option(False, "--json", help="Print JSON."),
    wide: bool = typer.Option(
        False, "--wide", help="Wrap the versions in full instead of cutting them to the terminal's width."
    ),
) -> None:
    """Compare several versions of one draft side by side."""
    if len(texts) < 2:
        raise InputError("give at least two versions to compare", field="texts")
    r = compare_variants(
        workspace().forecaster,
        texts,
        account=account,
        planned_at=planned(at, account),
        metric=metric,
        coverage=coverage,
        has_media=media,
        match=match,
    )
    if as_json:
        print_json(r.model_dump(mode="json"))
    else:
        print_variants(r, wide=wide)
