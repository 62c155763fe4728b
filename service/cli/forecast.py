"""Commands for forecasting: train, backtest, check."""

from __future__ import annotations

import json
from datetime import datetime, time, timedelta
from pathlib import Path
from typing import Any

import typer

from models.errors import InputError
from models.metrics import DEFAULT_COVERAGE, DEFAULT_METRIC, MAX_COVERAGE, MIN_COVERAGE, TARGETS
from service.account_choice import choose_account
from service.checking import check_drafts
from service.cli.base import app, out, print_json, workspace
from service.cli.choice_view import print_choice
from service.cli.mappings import DAY_FIRST, MONTH_FIRST, TIME_FORMAT
from service.cli.plan_view import plan_options, print_plan
from service.cli.prose import plural, say
from service.cli.render import Column, level_bar, print_table, typical_miss
from service.clock import localize, now_utc, zone
from service.forecast import training as forecasting
from service.forecast.answer import CAUTION, Forecast
from service.forecast.draft import Draft, make_draft, planned_time
from service.history.match_modes import Match
from service.ingest.plan_options import PlanOptions
from service.ingest.timestamps import TimeReader
from service.plan import forecast_plan
from service.track.facts import staleness
from service.workspace import Workspace

# Exit status when rows of a plan could not be forecast, as import's for rejected rows.
EXIT_REJECTS = 3

METRIC_HELP = "Metric to forecast: " + ", ".join(TARGETS) + "."
COVERAGE_HELP = f"Interval coverage, {MIN_COVERAGE} to {MAX_COVERAGE}."


@app.command("train")
def train_cmd(
    metric: str = typer.Option(DEFAULT_METRIC.value, "--metric", help=METRIC_HELP),
    skip_backtest: bool = typer.Option(
        False,
        "--skip-backtest",
        help="Train without the backtest (forecasts then state no backtested coverage).",
    ),
    if_stale: bool = typer.Option(
        False,
        "--if-stale",
        help="Train only when the model is stale (old, or its live coverage is off), for a scheduled job.",
    ),
) -> None:
    """Train a new forecast model version from the store."""
    if if_stale:
        why = staleness(workspace(), metric)
        if not why["stale"]:
            out.print(f"the {metric} model is not stale; nothing to do")
            return
        for w in why["warnings"]:
            out.print(f"stale: {w}", highlight=False)
    m = forecasting.train(workspace(), metric, backtest=not skip_backtest)
    out.print(
        f"trained {metric} model {m.version} on {m.report['n_train']} posts, "
        f"calibrated on the next {m.report['n_calibration']}"
    )
    if m.report.get("n_without_followers"):
        out.print(
            f"{m.report['n_without_followers']} posts were left out: no follower count was in force "
            f"at their time, so their {metric} is unknown"
        )
    if m.report.get("embedding", {}).get("quantize", "none") != "none":
        out.print(
            f"embedding vectors: ONNX {m.report['embedding']['quantize']} "
            "(approximate; neighbours differ from the fp32 model's)"
        )
    if "backtest" in m.report:
        print_backtest(m.report["backtest"], metric)


def print_backtest(bt: dict[str, Any], metric: str, *, details: bool = False) -> None:
    cols = [
        Column(header="forecaster", free=True),
        Column(header="typical miss", right=True),
        *(
            [
                Column(header="MAE (log)", right=True),
                Column(header="MSE (log)", right=True),
                Column(header="Spearman", right=True),
            ]
            if details
            else [Column(header="order (0–1)", right=True)]
        ),
        Column(header="intervals held", right=True),
        Column(header="weight", right=True),
    ]
    # Short enough to stay whole in an 80-column table; the method names are in --details.
    labels = {
        "account_median": "account median",
        "precedents_median": "precedents' median",
        "history_median": "history median",
        "timing_only": "timing only",
        "boosted": "precedents + timing",
        "text_ridge": "text alone",
        "learned_neighbours": "learned neighbours",
    }
    methods = {
        "boosted": "LightGBM quantile trees on precedent features and timing",
        "text_ridge": "ridge regression on the embedding vectors",
        "learned_neighbours": "neighbours in an MLKR projection of the vectors (Weinberger & Tesauro 2007)",
    }
    weights = bt.get("weights") or {}
    rows: list[list[str]] = []

    def row(key: str, name: str, s: dict[str, Any]) -> None:
        rows.append(
            [
                name,
                typical_miss(s["mae_log"]),
                *(
                    [
                        f"{s['mae_log']:.3f}",
                        "-" if s.get("mse_log") is None else f"{s['mse_log']:.3f}",
                        f"{s['spearman']:.3f}",
                    ]
                    if details
                    else [f"{max(s['spearman'], 0.0):.2f}"]
                ),
                "-" if s["coverage"] is None else f"{s['coverage']:.1%}",
                f"{weights[key]:.2f}" if key in weights else "-",
            ]
        )

    row("model", "sounding, combined", bt["model"])
    for k, s in bt["baselines"].items():
        row(k, labels.get(k, k), s)
    for k, s in (bt.get("candidates") or {}).items():
        if k not in bt["baselines"]:
            row(k, labels.get(k, k), s)
    title = (
        f"backtest of {metric}: {bt['n_folds']} time-ordered folds, {bt['n_test']} test posts, "
        f"nominal coverage {bt['coverage_nominal']:.0%}"
        if details
        else f"{metric} forecast for {bt['n_test']:,} past posts, in time order "
        f"({bt['coverage_nominal']:.0%} intervals)"
    )
    print_table(out, cols, rows, title=title)
    say(
        out,
        "typical miss: a typical forecast is off by this factor either way; order: how well it "
        "ranks posts in the right order (0–1, 1 is perfect); intervals held: how often the "
        "actual number fell inside the interval.",
    )
    if bt.get("fallback_folds"):
        say(
            out,
            f"in {bt['fallback_folds']} of {bt['n_folds']} past tries the combination did worse than a "
            "simple forecaster on the posts before them, so those tries used the better one alone",
        )
    if details:
        say(
            out,
            "typical miss is exp(MAE (log)), the mean absolute error of log1p values; MSE (log) is "
            "their mean squared error; order is Spearman's rank correlation; "
            + "; ".join(f"{labels[k]}: {v}" for k, v in methods.items())
            + ". Each fold trains on the posts before it and tests on the next (rolling origin).",
        )
    learned = bt.get("learned_neighbours")
    if learned and learned.get("offered", True):
        say(
            out,
            "learned neighbours: in use, the forecast with them did better in past tries"
            if learned["in_use"]
            else "learned neighbours: not in use, they did not improve the forecast in past tries",
        )
    if weights.get("timing"):
        say(out, f"the timing effect is added with weight {weights['timing']:.2f}")
    levels = bt.get("coverage_by_level", {})
    if levels:
        out.print("how often intervals held in past tries, by interval width:")
        for k, v in levels.items():
            out.print(f"  {float(k):>4.0%} interval  {level_bar(v)} held {v:6.1%}", highlight=False)
    if bt.get("note"):
        say(out, f"note: {bt['note']}", hanging="  ")


@app.command("backtest")
def backtest_cmd(
    metric: str = typer.Option(DEFAULT_METRIC.value, "--metric", help=METRIC_HELP),
    coverage: float = typer.Option(
        DEFAULT_COVERAGE, "--coverage", metavar="N", help="How sure the intervals should be, e.g. 0.8."
    ),
    folds: int = typer.Option(
        4, "--folds", metavar="N", help="How many time-ordered rounds to try (rolling-origin folds)."
    ),
    json_file: Path | None = typer.Option(
        None, "--json", metavar="FILE", help="Also write the report as JSON."
    ),
    details: bool = typer.Option(
        False, "--details", help="Also show the statistics by name (MAE (log), Spearman, folds)."
    ),
) -> None:
    """Time-ordered backtest of the forecast against simple baselines."""
    bt = forecasting.backtest(workspace(), metric, coverage=coverage, n_folds=folds)
    print_backtest(bt, metric, details=details)
    if json_file:
        json_file.write_text(json.dumps(bt, indent=2))
        out.print(f"report written to {json_file}")


def print_forecast(f: Forecast, *, wide: bool = False, details: bool = False) -> None:
    bt = (
        "not yet tried on past posts"
        if f.backtested_coverage is None
        else f"held in {f.backtested_coverage:.0%} of past tries"
    )
    say(
        out,
        f"{f.metric} for {f.account} at {f.local_time}: "
        f"{f.low:,.0f} – {f.high:,.0f} (median {f.median:,.0f}); "
        f"{f.coverage:.0%} interval, {bt}; model {f.model_version}",
    )
    for w in f.warnings:
        say(out, f"warning: {w}", hanging="  ", style="yellow")
    if f.note:
        say(out, f"note: {f.note}", hanging="  ")
    for g in f.contributions.groups:
        say(out, g.summary, indent="  ", hanging="    ")
    rows = []
    for p in f.precedents[:8]:
        v = p.metrics.get(f.metric)
        rows.append(
            [
                f"{p.similarity:.2f}",
                p.account,
                f"{p.weight:.2f}",
                f"{p.posted_at:%Y-%m-%d}" + (" *" if p.still_gathering else ""),
                "-" if v is None else f"{v:,}",
                p.text,
            ]
        )
    print_table(
        out,
        [
            Column(header="similarity", right=True),
            # Left out last first when the text would get too little room.
            Column(header="account", optional=True),
            Column(header="weight", right=True, optional=True),
            Column(header="posted"),
            Column(header=f.metric.replace("_", " "), right=True),
            Column(header="text", free=True),
        ],
        rows,
        title="precedents",
        wide=wide,
    )
    if any(p.still_gathering for p in f.precedents[:8]):
        out.print(
            "* still gathering: its metrics are not final yet, so it is shown but not used", highlight=False
        )
    if f.calibration:  # calibration used, live coverage so far
        live = f.live_coverage
        held = (
            f"intervals given so far held in {live.coverage:.0%} of {plural(live.scored, 'post')} "
            "that went out"
            if live is not None and live.scored and live.coverage is not None
            else "no forecast given here has been scored against a published post yet"
        )
        say(out, held)
        if details:
            c = f.calibration
            say(
                out,
                f"calibration: {c.method} (CQR, Romano et al. 2019; +aci: adaptive conformal "
                "inference, Gibbs & Candès 2021)",
            )
            say(out, f"adaptive level (alpha_t) {c.alpha_t:.3f}, stated {c.alpha:.3f}")
            say(
                out,
                f"seen: {c.outcomes} scored forecasts, {c.pseudo_outcomes} pseudo-outcomes"
                + ("; widening held back" if c.widening_held else ""),
            )
            if c.reason:
                say(out, f"why: {c.reason}", hanging="  ")
    say(out, CAUTION, style="dim")


def planned(at: str | None, account: str, options: PlanOptions | None = None) -> datetime | None:
    """``--at`` read as a plan file's times are (zone, format, date order)."""
    o = options or PlanOptions()
    return planned_time(
        workspace().store,
        account,
        at,
        where="--at",
        reader=TimeReader(layout=o.layout()),
        timezone=o.timezone,
    )


#: How near-repeats are found: one option for every command that warns.
REPEATS_MATCH = typer.Option(
    Match.MEANING,
    "--match",
    help="Find near-repeats by meaning (the text's embedding), by the words they share (hashtags, "
    "@mentions and numbers included; BM25) or both.",
)


@app.command("check")
def check_cmd(
    text: str | None = typer.Argument(None, help="The draft (or use --plan for a plan file)."),
    account: str | None = typer.Option(
        None, "--account", help="Account that would post it (with --plan: for rows without one)."
    ),
    accounts: list[str] | None = typer.Option(
        None,
        "--accounts",
        metavar="HANDLES",
        help="Rank the accounts that could post it: 'all', or handles (repeat, or a comma list). "
        "Not recorded in the track record.",
    ),
    at: str | None = typer.Option(
        None, "--at", help="Planned time, ISO 8601 (no offset: the account's zone). Default: now."
    ),
    coverage: float = typer.Option(DEFAULT_COVERAGE, "--coverage", help=COVERAGE_HELP),
    metric: str = typer.Option(DEFAULT_METRIC.value, "--metric", help=METRIC_HELP),
    plan: Path | None = typer.Option(
        None, "--plan", help="Plan CSV: draft_id,account,text,planned_at[,has_media]."
    ),
    dest: Path | None = typer.Option(None, "--out", help="Where to write the plan's forecasts (CSV)."),
    timezone: str | None = typer.Option(
        None, "--timezone", help="IANA zone of times without an offset (default: the account's)."
    ),
    time_format: str | None = TIME_FORMAT,
    day_first: bool = DAY_FIRST,
    month_first: bool = MONTH_FIRST,
    allow_rejects: bool = typer.Option(
        False, "--allow-rejects", help="With --plan: exit 0 even if rows could not be forecast (else 3)."
    ),
    media: bool = typer.Option(False, "--media", help="An image or video goes with the text."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON."),
    no_record: bool = typer.Option(False, "--no-record", help="Keep this forecast out of the track record."),
    wide: bool = typer.Option(
        False, "--wide", help="Wrap post texts in full instead of cutting them to the terminal's width."
    ),
    details: bool = typer.Option(
        False, "--details", help="Also name the calibration method and show its level and why it moved."
    ),
    match: Match = REPEATS_MATCH,
) -> None:
    """Forecast a draft (or a plan file) with its interval, precedents and reasons."""
    ws = workspace()
    options = plan_options(
        account=account,
        timezone=timezone,
        time_format=time_format,
        day_first=day_first,
        month_first=month_first,
    )
    if plan is not None:
        if dest is None:
            raise InputError("--plan needs --out for the forecasts", field="--out")
        counts = forecast_plan(
            ws,
            plan,
            dest,
            metric=metric,
            coverage=coverage,
            record=not no_record,
            options=options,
            match=match,
        )
        if as_json:
            print_json({"rows": counts.rows, "forecast": counts.forecast, "lines": counts.lines})
        else:
            print_plan(counts, str(dest), wide=wide)
        if counts.failed and not allow_rejects:
            raise typer.Exit(EXIT_REJECTS)
        return
    if not text:
        raise InputError("give the draft text, or --plan with a plan file", field="text")
    if accounts:
        if account:
            raise InputError("give --account or --accounts, not both", field="--accounts")
        with ws.store.pinned():
            choice = choose_account(
                ws,
                text,
                accounts=[h for a in accounts for h in a.split(",")],
                planned_at=at,
                timezone=options.timezone,
                reader=TimeReader(layout=options.layout()),
                has_media=media,
                metric=metric,
                coverage=coverage,
                where="--at",
                match=match,
            )
        if as_json:
            print_json(choice.model_dump(mode="json"))
        else:
            print_choice(choice, details=details)
        return
    if not account:
        raise InputError("say which account would post it with --account", field="--account")
    # Adapted, staleness-checked and recorded in the track record.
    with ws.store.pinned():  # the store's counters read once for the whole answer
        when = planned(at, account, options)
        draft = make_draft(
            ws.store, text=text, account=account, planned_at=when, has_media=media, where="--at"
        )
        f = check_drafts(
            ws, [draft], metric=metric, coverage=coverage, record=not no_record, source="check", match=match
        )[0]
    if as_json:
        print_json(f.model_dump(mode="json"))
    else:
        print_forecast(f, wide=wide, details=details)


def demo_forecast(ws: Workspace, draft: str) -> None:
    """The forecasting half of `sounding demo`."""
    out.rule("3. train and backtest a forecast of impressions")
    m = forecasting.train(ws, DEFAULT_METRIC)
    out.print(
        f"model {m.version}: {m.report['n_train']} posts to train, {m.report['n_calibration']} to calibrate"
    )
    print_backtest(m.report["backtest"], DEFAULT_METRIC)
    out.rule("4. forecast the sample draft for tomorrow noon")
    account = "loomhaven"
    tz = ws.store.account(account).timezone
    tomorrow = now_utc().astimezone(zone(tz)).date() + timedelta(days=1)
    when = localize(datetime.combine(tomorrow, time(12, 0)), tz)
    f = ws.forecaster.forecast([Draft(text=draft, account=account, planned_at=when)])[0]
    print_forecast(f)
