"""Commands for forecasting: train, backtest, check."""

from __future__ import annotations

import json
from datetime import datetime, time, timedelta
from pathlib import Path
from typing import Any

import typer

from models.errors import InputError
from models.metrics import DEFAULT_COVERAGE, DEFAULT_METRIC, MAX_COVERAGE, MIN_COVERAGE, TARGETS
from service import forecasting
from service.cli.base import app, out, print_json, workspace
from service.cli.render import Column, level_bar, print_table, typical_miss
from service.forecasting import CAUTION, Draft, Forecast
from service.plan import forecast_plan
from service.timeparse import localize, now_utc, parse_time, zone
from service.track_record import give, staleness
from service.workspace import Workspace

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
    if if_stale:  # track record hook (issue 11)
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
    if m.report.get("embedding", {}).get("quantize", "none") != "none":
        out.print(
            f"embedding vectors: ONNX {m.report['embedding']['quantize']} "
            "(approximate; neighbours differ from the fp32 model's)"
        )
    if "backtest" in m.report:
        print_backtest(m.report["backtest"], metric)


def print_backtest(bt: dict[str, Any], metric: str) -> None:
    cols = [
        Column(header="forecaster", free=True),
        Column(header="typical miss", right=True),
        Column(header="MAE (log)", right=True),
        Column(header="Spearman", right=True),
        Column(header="coverage", right=True),
        Column(header="weight", right=True),
    ]
    # Short enough to stay whole in an 80-column table.
    labels = {
        "account_median": "account median",
        "precedents_median": "precedents' median",
        "history_median": "history median",
        "timing_only": "timing only",
        "boosted": "boosted trees",
        "text_ridge": "text model",
    }
    weights = bt.get("weights") or {}
    rows: list[list[str]] = []

    def row(key: str, name: str, s: dict[str, Any]) -> None:
        rows.append(
            [
                name,
                typical_miss(s["mae_log"]),
                f"{s['mae_log']:.3f}",
                f"{s['spearman']:.3f}",
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
    print_table(
        out,
        cols,
        rows,
        title=f"backtest of {metric}: {bt['n_folds']} time-ordered "
        f"folds, {bt['n_test']} test posts, nominal coverage {bt['coverage_nominal']:.0%}",
    )
    out.print(
        "boosted trees: with the timing effect; typical miss: a typical forecast is off by "
        "this factor either way "
        "(exp of the mean absolute error of log1p values, MAE (log)).",
        highlight=False,
    )
    if weights.get("timing"):
        out.print(f"the timing effect is added with weight {weights['timing']:.2f}", highlight=False)
    levels = bt.get("coverage_by_level", {})
    if levels:
        out.print("how often intervals held in the backtest, by stated coverage:")
        for k, v in levels.items():
            out.print(f"  {float(k):>4.0%} stated  {level_bar(v)} {v:6.1%}", highlight=False)
    if bt.get("note"):
        out.print(f"note: {bt['note']}", highlight=False)


@app.command("backtest")
def backtest_cmd(
    metric: str = typer.Option(DEFAULT_METRIC.value, "--metric", help=METRIC_HELP),
    coverage: float = typer.Option(DEFAULT_COVERAGE, "--coverage", help="Nominal interval coverage."),
    folds: int = typer.Option(4, "--folds", help="Number of rolling-origin folds."),
    json_file: Path | None = typer.Option(None, "--json", help="Also write the report as JSON."),
) -> None:
    """Time-ordered backtest of the forecast against simple baselines."""
    bt = forecasting.backtest(workspace(), metric, coverage=coverage, n_folds=folds)
    print_backtest(bt, metric)
    if json_file:
        json_file.write_text(json.dumps(bt, indent=2))
        out.print(f"report written to {json_file}")


def print_forecast(f: Forecast, *, wide: bool = False) -> None:
    bt = "not backtested" if f.backtested_coverage is None else f"{f.backtested_coverage:.0%} in backtests"
    out.print(
        f"[bold]{f.metric}[/bold] for {f.account} at {f.local_time}: "
        f"[bold]{f.low:,.0f} – {f.high:,.0f}[/bold] (median {f.median:,.0f}); "
        f"{f.coverage:.0%} interval, held {bt}; model {f.model_version}"
    )
    for w in f.warnings:
        out.print(f"[yellow]warning:[/yellow] {w}", highlight=False)
    if f.note:  # issue 10
        out.print(f"note: {f.note}", highlight=False)
    for g in f.contributions.groups:
        out.print(f"  {g.summary}", highlight=False)
    rows = []
    for p in f.precedents[:8]:
        v = p.metrics.get(f.metric)
        rows.append(
            [
                f"{p.similarity:.2f}",
                f"{p.weight:.2f}",
                p.account,
                f"{p.posted_at:%Y-%m-%d}" + (" *" if p.still_gathering else ""),
                "-" if v is None else f"{v:,}",
                p.text,
            ]
        )
    print_table(
        out,
        [
            Column(header="similarity", right=True),
            Column(header="weight", right=True, optional=True),
            Column(header="account"),
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
    if f.calibration:  # track record (issue 11): calibration used, live coverage so far
        live = f.live_coverage
        held = (
            f"held {live.coverage:.0%} of {live.scored} scored forecasts"
            if live is not None and live.scored and live.coverage is not None
            else "no forecast scored yet"
        )
        out.print(f"calibration: {f.calibration.method}; live coverage: {held}")
    out.print(f"[dim]{CAUTION}[/dim]")


def planned(at: str | None, account: str) -> datetime | None:
    if not at:
        return None
    tz = workspace().store.account(account).timezone
    return parse_time(at, tz=tz, where="--at")


@app.command("check")
def check_cmd(
    text: str | None = typer.Argument(None, help="The draft (or use --plan for a plan file)."),
    account: str | None = typer.Option(None, "--account", help="Account that would post it."),
    at: str | None = typer.Option(
        None, "--at", help="Planned time, ISO 8601 (no offset: the account's zone). Default: now."
    ),
    coverage: float = typer.Option(DEFAULT_COVERAGE, "--coverage", help=COVERAGE_HELP),
    metric: str = typer.Option(DEFAULT_METRIC.value, "--metric", help=METRIC_HELP),
    plan: Path | None = typer.Option(
        None, "--plan", help="Plan CSV: draft_id,account,text,planned_at[,has_media]."
    ),
    dest: Path | None = typer.Option(None, "--out", help="Where to write the plan's forecasts (CSV)."),
    media: bool = typer.Option(False, "--media", help="An image or video goes with the text."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON."),
    no_record: bool = typer.Option(False, "--no-record", help="Keep this forecast out of the track record."),
    wide: bool = typer.Option(
        False, "--wide", help="Wrap post texts in full instead of cutting them to the terminal's width."
    ),
) -> None:
    """Forecast a draft (or a plan file) with its interval, precedents and reasons."""
    ws = workspace()
    if plan is not None:
        if dest is None:
            raise InputError("--plan needs --out for the forecasts", field="--out")
        counts = forecast_plan(ws, plan, dest, metric=metric, coverage=coverage, record=not no_record)
        out.print(
            f"{counts.forecast} of {counts.rows} drafts forecast into {dest}"
            + (f"; {counts.failed} with a reason in warnings" if counts.failed else "")
        )
        return
    if not text:
        raise InputError("give the draft text, or --plan with a plan file", field="text")
    if not account:
        raise InputError("say which account would post it with --account", field="--account")
    # Adapted, staleness-checked and recorded in the track record (issue 11).
    f = give(
        ws,
        [Draft(text=text, account=account, planned_at=planned(at, account), has_media=media)],
        metric=metric,
        coverage=coverage,
        record=not no_record,
        source="check",
    )[0]
    if as_json:
        print_json(f.model_dump(mode="json"))
    else:
        print_forecast(f, wide=wide)


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
