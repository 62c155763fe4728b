"""The track record: how the forecasts sounding gave turned out."""

from __future__ import annotations

from pathlib import Path

import typer

from models.errors import InputError
from models.metrics import DEFAULT_METRIC
from models.track_plots import FORMATS, track_record_figure
from service.cli.base import app, out, print_json, workspace
from service.cli.prose import plural, say
from service.cli.render import Column, print_table, typical_miss
from service.cli.tables import percent, write_csv
from service.clock import parse_since
from service.track.adaptation import reset_adaptation
from service.track.answers import PeriodSummary, TrackRecord
from service.track.report import report


def _pct(v: float | None) -> str:
    return "-" if v is None else f"{v:.1%}"


def _miss(v: float | None) -> str:
    """A log error read plainly: off by this factor either way."""
    return "-" if v is None else typical_miss(abs(v))


def _periods(rep: TrackRecord) -> list[tuple[str, PeriodSummary]]:
    """Each month, then the whole record."""
    return [*((m.month, m) for m in rep.months), ("overall", rep.overall)]


def track_table(rep: TrackRecord) -> tuple[list[str], list[list[str]]]:
    """The periods' table as the screen shows it, percentages as whole numbers."""
    rows = []
    for name, s in _periods(rep):
        ci, b = s.live_coverage_ci, s.baselines
        low, high = ("", "") if ci is None else (percent(ci[0]), percent(ci[1]))
        misses = [s.mae_log, b.account_median.mae_log, b.precedents_median.mae_log]
        rows.append(
            [
                name,
                str(s.given),
                str(s.settled),
                percent(s.stated_coverage),
                percent(s.live_coverage),
                low,
                high,
                *("" if m is None else _miss(m) for m in misses),
                str(s.matched),
            ]
        )
    headers = [
        "period",
        "given",
        "settled",
        "stated coverage",
        "live coverage",
        "live coverage low",
        "live coverage high",
        "typical miss",
        "account median miss",
        "precedents median miss",
        "matched",
    ]
    return headers, rows


def print_report(rep: TrackRecord, *, details: bool = False) -> None:
    cols = [
        Column(header="period"),
        Column(header="given", right=True),
        Column(header="settled", right=True),
        Column(header="interval" if not details else "stated", right=True),
        Column(header="held" if not details else "live", right=True),
        Column(header="held, 95% sure" if not details else "95% CI", right=True),
        Column(header="typical miss", right=True),
        Column(header="account median", right=True, optional=True),
        Column(header="precedents' median", right=True, optional=True),
        Column(header="matched", right=True, optional=True),
    ]
    rows = []
    for name, s in _periods(rep):
        ci, b = s.live_coverage_ci, s.baselines
        held = "-" if ci is None else f"{ci[0]:.1%}–{ci[1]:.1%}"
        misses = [s.mae_log, b.account_median.mae_log, b.precedents_median.mae_log]
        rows.append(
            [
                name,
                str(s.given),
                str(s.settled),
                _pct(s.stated_coverage),
                _pct(s.live_coverage),
                held,
                *(_miss(m) for m in misses),
                str(s.matched),
            ]
        )
    print_table(
        out,
        cols,
        rows,
        title=f"track record of {rep.metric} forecasts (95% CI: Wilson; the simple "
        "forecasters' typical miss on the same posts)"
        if details
        else f"how the {rep.metric} forecasts given turned out",
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
        if details:
            say(
                out,
                f"adaptive calibration at {float(c.level):.0%}: alpha_t {c.alpha_t:.3f} "
                f"after {plural(c.outcomes, 'outcome')} and {plural(c.pseudo_outcomes, 'pseudo-outcome')} "
                "(adaptive conformal inference, Gibbs & Candès 2021)",
            )
        else:
            say(
                out,
                f"{float(c.level):.0%} intervals are adjusted to how past forecasts did: "
                f"{plural(c.outcomes, 'published post')} so far, and "
                f"{plural(c.pseudo_outcomes, 'older post')} forecast as it would have been",
            )
    say(
        out,
        "held: how often the intervals given held on the posts that went out; the range beside "
        "it says how sure that share is; settled: posts whose numbers are final; beside "
        "sounding's typical miss, the simple forecasters' on the same posts.",
        style="dim",
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
    csv_path: Path | None = typer.Option(None, "--csv", help="Write the table of periods as CSV."),
    reset: bool = typer.Option(
        False,
        "--reset-adaptation",
        help="Forget what the adaptive calibration of this metric has learnt, then report.",
    ),
    details: bool = typer.Option(
        False, "--details", help="Also show the statistics by name (stated and live coverage, alpha_t)."
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
        print_report(rep, details=details)
        if plot is not None:
            out.print(f"plot written to {plot}")
    if csv_path is not None:
        write_csv(csv_path, *track_table(rep))
