"""The track record: how the forecasts sounding gave turned out."""

from __future__ import annotations

from pathlib import Path

import typer

from models.errors import InputError
from models.metrics import DEFAULT_METRIC
from models.track_plots import FORMATS, track_record_figure
from service.cli.base import app, out, print_json, workspace
from service.cli.render import Column, print_table, typical_miss
from service.track_record import PeriodSummary, TrackRecord, parse_since, report, reset_adaptation


def _pct(v: float | None) -> str:
    return "-" if v is None else f"{v:.1%}"


def _miss(v: float | None) -> str:
    """A log error read plainly: off by this factor either way."""
    return "-" if v is None else typical_miss(abs(v))


def print_report(rep: TrackRecord) -> None:
    cols = [
        Column(header="period"),
        Column(header="given", right=True),
        Column(header="settled", right=True),
        Column(header="stated", right=True),
        Column(header="live", right=True),
        Column(header="95% CI", right=True),
        Column(header="typical miss", right=True),
        Column(header="account median", right=True, optional=True),
        Column(header="precedents' median", right=True, optional=True),
        Column(header="matched", right=True, optional=True),
    ]
    rows = []
    periods: list[tuple[str, PeriodSummary]] = [(m.month, m) for m in rep.months]
    for name, s in [*periods, ("overall", rep.overall)]:
        ci = s.live_coverage_ci
        b = s.baselines
        rows.append(
            [
                name,
                str(s.given),
                str(s.settled),
                _pct(s.stated_coverage),
                _pct(s.live_coverage),
                "-" if ci is None else f"{ci[0]:.1%}–{ci[1]:.1%}",
                _miss(s.mae_log),
                _miss(b.account_median.mae_log),
                _miss(b.precedents_median.mae_log),
                str(s.matched),
            ]
        )
    print_table(
        out,
        cols,
        rows,
        title=f"track record of {rep.metric} forecasts (95% CI: Wilson; the simple "
        "forecasters' typical miss on the same posts)",
    )
    if rep.worst:
        worst = []
        for r in rep.worst:
            top = r.precedents[0] if r.precedents else None
            worst.append(
                [
                    r.draft_id or "-",
                    r.account,
                    (r.posted_at or "")[:10],
                    f"{r.low:,.0f}–{r.high:,.0f}",
                    "-" if r.outcome is None else f"{r.outcome:,.0f}",
                    _miss(r.error_log),
                    "-" if top is None else f"{top.post_id}: {top.text}",
                ]
            )
        print_table(
            out,
            [
                Column(header="draft"),
                Column(header="account", optional=True),
                Column(header="posted"),
                Column(header="interval", right=True),
                Column(header="outcome", right=True),
                Column(header="off by", right=True),
                Column(header="top precedent", free=True),
            ],
            worst,
            title="the forecasts that missed worst",
        )
    for c in rep.calibration:
        out.print(
            f"adaptive calibration at {float(c.level):.0%}: alpha_t {c.alpha_t:.3f} "
            f"after {c.outcomes} outcomes and {c.pseudo_outcomes} pseudo-outcomes"
        )
    out.print(
        "[dim]Live coverage is how often the stated intervals held on the posts that "
        "went out; the interval beside it says how sure that share is.[/dim]"
    )


@app.command("track-record")
def track_record_cmd(
    since: str | None = typer.Option(
        None, "--since", help="Only forecasts given from this date or time (ISO 8601)."
    ),
    account: str | None = typer.Option(None, "--account", help="Only this account."),
    metric: str = typer.Option(DEFAULT_METRIC.value, "--metric", help="The forecast metric."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON."),
    plot: Path | None = typer.Option(None, "--plot", help="Also draw the record (.png or .svg)."),
    reset: bool = typer.Option(
        False,
        "--reset-adaptation",
        help="Forget what the adaptive calibration of this metric has learnt, then report.",
    ),
) -> None:
    """How the forecasts given turned out: live against stated coverage, errors, worst misses."""
    ws = workspace()
    if reset:
        n = reset_adaptation(ws, metric)
        out.print(f"adaptive calibration of {metric} reset ({n} levels)")
    rep = report(ws, since=parse_since(since), account=account, metric=metric)
    if plot is not None:
        fmt = plot.suffix.lstrip(".").lower()
        if fmt not in FORMATS:
            raise InputError(f"--plot must end in .png or .svg, got {plot.name}", field="--plot")
        plot.write_bytes(track_record_figure(rep.model_dump(mode="json"), fmt=fmt))
    if as_json:
        print_json(rep.model_dump(mode="json"))
    else:
        print_report(rep)
        if plot is not None:
            out.print(f"plot written to {plot}")
