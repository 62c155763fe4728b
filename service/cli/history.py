"""Commands for the history store: accounts, import, index, precedents, serve, demo."""

from __future__ import annotations

import dataclasses
import ipaddress
import json
import os
from datetime import datetime
from pathlib import Path

import typer
from rich.progress import (
    BarColumn,
    MofNCompleteColumn,
    Progress,
    TextColumn,
    TimeRemainingColumn,
)

from models.errors import InputError
from models.metrics import DEFAULT_METRIC, METRIC_COLUMNS
from service.analysis.team import DEFAULT_MIN_POSTS, team_overview
from service.cli.base import app, err, is_terminal, next_step, out, print_json, workspace
from service.cli.forecast import demo_forecast
from service.cli.mappings import (
    ACCOUNT,
    DAY_FIRST,
    DECIMAL_COMMA,
    LABEL,
    MAP,
    MONTH_FIRST,
    TIME_FORMAT,
    TIMEZONE,
    given_options,
)
from service.cli.render import Column, print_table
from service.cli.team_view import print_team
from service.clock import now_utc, parse_since, parse_time
from service.history.match_modes import Match
from service.history.precedents import Precedent, Precedents
from service.ingest.answers import ImportPreview, ImportSummary
from service.ingest.mappings import combine, load_mapping
from service.ingest.ray_embedding import cluster_import_options
from service.settings import Settings

# The demo history sits beside the source tree; an installed copy (the
# container image) points at it with SOUNDING_DEMO_DIR.
DEMO_DIR = Path(os.environ.get("SOUNDING_DEMO_DIR") or Path(__file__).resolve().parents[2] / "demo_data")


@app.command("account")
def account_cmd(
    handle: str = typer.Argument(..., help="The account's handle."),
    name: str | None = typer.Option(None, "--name", help="Display name."),
    timezone: str | None = typer.Option(
        None, "--timezone", help="IANA time zone used for the local hour, e.g. Europe/London."
    ),
    reference: bool | None = typer.Option(
        None,
        "--reference/--team",
        help="--reference: a peer's account, whose posts are searched (precedents, near-repeats, "
        "topic examples) and may come without metrics, but never measured or learnt from; "
        "--team: one of the team's own accounts again.",
    ),
    followers: int | None = typer.Option(
        None, "--followers", help="The account's follower count, from --since on (until the next count)."
    ),
    since: str | None = typer.Option(
        None,
        "--since",
        help="When the --followers count was taken: a date (UTC midnight) or an ISO 8601 time; default now.",
    ),
) -> None:
    """Create or update an account: name, zone, reference or team, follower count."""
    if since is not None and followers is None:
        raise InputError("--since dates a follower count: give --followers N with it", field="since")
    at = parse_since(since) or now_utc()  # a date is its UTC midnight
    a = workspace(create=True).change_account(
        handle, display_name=name, timezone=timezone, reference=reference, followers=followers, since=at
    )
    kind = ", reference account" if a.reference else ""
    out.print(
        f"{a.handle}: {a.display_name or '(no name)'}, {a.timezone}, {a.posts} posts{kind}", highlight=False
    )
    if followers is not None:
        out.print(f"{followers:,} followers from {at:%Y-%m-%d %H:%M} UTC", highlight=False)


@app.command("accounts")
def accounts_cmd(
    as_json: bool = typer.Option(False, "--json", help="Print JSON."),
    details: bool = typer.Option(
        False,
        "--details",
        help="The team overview: each account's posts, share, median and its recent trend, "
        "best hours and the topics where it does better than the team.",
    ),
    metric: str = typer.Option(DEFAULT_METRIC.value, "--metric", help="With --details: the metric read."),
    min_posts: int = typer.Option(
        DEFAULT_MIN_POSTS,
        "--min-posts",
        metavar="N",
        help="With --details: posts an hour slot or a topic needs before it is read.",
    ),
) -> None:
    """List the accounts in the store (with --details, the team overview)."""
    if details:
        overview = team_overview(workspace(), metric=metric, min_posts=min_posts)
        if as_json:
            print_json(overview.model_dump(mode="json"))
        else:
            print_team(overview)
        return
    rows = workspace().store.accounts()
    if as_json:
        print_json([a.model_dump(mode="json") for a in rows])
        return
    if not rows:
        out.print(next_step() or "No accounts yet: import some history first.", highlight=False)
        return
    print_table(
        out,
        [
            Column(header="handle"),
            Column(header="name", free=True),
            Column(header="time zone"),
            Column(header="posts", right=True),
        ],
        [
            [
                a.handle + (" (reference)" if a.reference else ""),
                a.display_name or "",
                a.timezone,
                f"{a.posts:,}",
            ]
            for a in rows
        ],
    )


def print_summary(s: ImportSummary, *, limit: int = 20) -> None:
    for p in s.problems[:limit]:
        err.print(f"rejected {p}", highlight=False, markup=False)
    if len(s.problems) > limit:
        err.print(f"... and {len(s.problems) - limit} more rejected rows")
    if s.stopped:
        err.print(s.stopped, highlight=False, markup=False)
    rough = f", {s.approximate} with approximate counts" if s.approximate else ""
    out.print(
        f"added {s.added}, updated {s.updated}, unchanged {s.unchanged}, rejected {s.rejected}"
        f" (embedded {s.embedded} new texts{rough})"
    )


def print_preview(p: ImportPreview, *, limit: int = 10) -> None:
    out.print("dry run: nothing is stored", highlight=False)
    print_table(
        out,
        [Column(header="our column"), Column(header="their column"), Column(header="read as", free=True)],
        [[c.ours, c.theirs or "-", c.reads] for c in p.columns],
        title="columns",
    )
    unused = p.unused_columns
    if unused:
        shown = ", ".join(unused[:20]) + (f" and {len(unused) - 20} more" if len(unused) > 20 else "")
        out.print(f"not read: {shown}", highlight=False, markup=False)
    metrics = [c.ours for c in p.columns if c.ours in METRIC_COLUMNS and c.theirs]
    out.print(f"first {len(p.rows)} rows as read (~ marks an approximate count):", highlight=False)
    for r in p.rows:
        local = f"{r.local_time[:16].replace('T', ' ')}{r.local_time[19:]} {r.zone}"
        counts = ", ".join(f"{m} {'~' if m in r.approximate else ''}{_n(r.metrics.get(m))}" for m in metrics)
        text = r.text if len(r.text) <= 40 else r.text[:37] + "..."
        out.print(
            f"  line {r.line}: {r.account} {r.post_id}, {r.posted_at:%Y-%m-%d %H:%M}"
            f" UTC = {local}; {counts}; {text!r}",
            highlight=False,
            markup=False,
        )
    rough = f" ({p.approximate} with approximate counts)" if p.approximate else ""
    out.print(f"would import {p.would_import} rows{rough}; {p.rejected} would be rejected", highlight=False)
    for prob in p.problems[:limit]:
        err.print(f"rejected {prob}", highlight=False, markup=False)
    if len(p.problems) > limit:
        err.print(f"... and {len(p.problems) - limit} more rejected rows")
    if p.stopped:
        err.print(p.stopped, highlight=False, markup=False)
    for fix in p.fixes:
        col = f"column {fix.column}, " if fix.column else ""
        err.print(
            f"to try: {fix.hint} ({col}{fix.rows} rows, first on line {fix.first_line})",
            highlight=False,
            markup=False,
        )


# Exit status of an import that did not store every row: a scheduled script notices.
EXIT_REJECTS = 3


@app.command("import")
def import_cmd(
    file: Path = typer.Argument(..., help="CSV file in our canonical columns (or mapped)."),
    account: str | None = ACCOUNT,
    mapping: list[str] = MAP,
    timezone: str | None = TIMEZONE,
    time_format: str | None = TIME_FORMAT,
    day_first: bool = DAY_FIRST,
    month_first: bool = MONTH_FIRST,
    decimal_comma: bool = DECIMAL_COMMA,
    label: list[str] = LABEL,
    saved: str | None = typer.Option(
        None,
        "--mapping",
        help="Read the file with a saved mapping (sounding mapping save); options given here override it.",
    ),
    encoding: str | None = typer.Option(
        None,
        "--encoding",
        metavar="CODEC",
        help="The file's text encoding, any Python codec (cp1252, latin-1, utf-16...). Default: UTF-8.",
    ),
    new_account: bool = typer.Option(
        False,
        "--new-account",
        help="Create the accounts the file names that the store lacks, in the --timezone zone "
        "(without it, an unknown account is refused).",
    ),
    dry_run: bool = typer.Option(
        False,
        "--dry-run",
        help="Store nothing: show how columns map, the first rows as read and what would be rejected.",
    ),
    allow_rejects: bool = typer.Option(
        False, "--allow-rejects", help=f"Exit 0 even if rows were rejected (else {EXIT_REJECTS})."
    ),
    as_json: bool = typer.Option(False, "--json", help="Print the summary as JSON."),
    cluster: str | None = typer.Option(
        None,
        "--cluster",
        help="Embed new texts on a Ray cluster at ray://HOST:PORT "
        "(needs sounding[cluster] here and sounding on the cluster's nodes).",
    ),
    cluster_workers: int = typer.Option(
        2, "--cluster-workers", min=1, help="Model-holding Ray workers, one CPU each."
    ),
) -> None:
    """Import past posts and their metrics from a CSV file.

    Exits 3 when rows were rejected (unless --allow-rejects) or part of the file
    could not be read; a dry run exits the same way for what it would do."""
    ws = workspace(create=not dry_run)
    given = given_options(
        mapping=mapping,
        account=account,
        timezone=timezone,
        time_format=time_format,
        day_first=day_first,
        month_first=month_first,
        decimal_comma=decimal_comma,
        labels=label,
    )
    options = combine(load_mapping(ws.settings.resolved_home, saved) if saved else None, given)
    options = dataclasses.replace(
        options, new_accounts=new_account_zone(new_account, options.timezone), encoding=encoding
    )
    on_cluster = cluster_import_options(ws, cluster, workers=cluster_workers)
    summary: ImportSummary | ImportPreview
    if dry_run:
        summary = ws.preview_import(file, options)
        if as_json:
            print_json(summary.model_dump(mode="json"))
        else:
            print_preview(summary)
    elif is_terminal() and not as_json:
        cols = (TextColumn("importing"), BarColumn(), MofNCompleteColumn(), TimeRemainingColumn())
        with Progress(*cols, console=out, transient=True) as bar:
            task = bar.add_task("import", total=None)

            def progress(done: int, total: int) -> None:
                bar.update(task, completed=done, total=total)

            summary = ws.import_csv(file, options, progress=progress, **on_cluster)
    else:
        summary = ws.import_csv(file, options, **on_cluster)
    if isinstance(summary, ImportSummary):
        if as_json:
            print_json(summary.model_dump(mode="json"))
        else:
            print_summary(summary)
    if summary.skipped_lines or (summary.rejected and not allow_rejects):
        raise typer.Exit(EXIT_REJECTS)


def new_account_zone(new_account: bool, timezone: str | None) -> str | None:
    """The zone new accounts start in, when asked for; new accounts need one."""
    if not new_account:
        return None
    if not timezone:
        raise InputError(
            "--new-account needs --timezone: the zone the new account's local hours are counted in",
            field="--timezone",
            hint="e.g. --new-account --timezone Europe/London",
        )
    return timezone


@app.command("reindex")
def reindex_cmd() -> None:
    """Rebuild the search index from the vectors in the store."""
    index = workspace().reindex()
    cfg = index.config()
    how = (
        f"HNSW graph, efSearch {cfg['ef_search']}, recall@10 {cfg['recall_at_10']:.3f} "
        f"against exact search on {cfg['recall_sample']} of its own vectors"
        if cfg["approximate"]
        else "exact search"
    )
    out.print(f"index rebuilt: {index.ntotal} posts ({how})")


def _time_opt(value: str | None, name: str) -> datetime | None:
    return parse_time(value, tz="UTC", where=name) if value else None


def print_precedents(found: list[Precedent], *, title: str = "precedents", wide: bool = False) -> None:
    rows = [
        [
            f"{p.similarity:.2f}",
            p.account,
            p.posted_at.strftime("%Y-%m-%d") + (" *" if p.still_gathering else ""),
            "reference" if p.reference else _n(p.metrics.get("impressions")),
            _n(p.metrics.get("engagements")),
            p.text,
        ]
        for p in found
    ]
    print_table(
        out,
        [
            Column(header="similarity", right=True),
            Column(header="account", optional=True),
            Column(header="posted"),
            Column(header="impressions", right=True),
            Column(header="engagements", right=True, optional=True),
            Column(header="text", free=True),
        ],
        rows,
        title=title,
        wide=wide,
    )
    if any(p.still_gathering for p in found):
        out.print("* still gathering: its metrics are not final yet", highlight=False)
    if any(p.reference for p in found):
        out.print(
            "reference: a reference account's post (a peer's), shown without metrics",
            highlight=False,
        )


def _n(v: int | None) -> str:
    return "-" if v is None else f"{v:,}"


@app.command("precedents")
def precedents_cmd(
    text: str = typer.Argument(..., help="The draft."),
    account: str | None = typer.Option(None, "--account", help="Only this account's posts."),
    k: int = typer.Option(10, "-k", "--count", help="How many precedents."),
    since: str | None = typer.Option(None, "--since", help="Only posts from this time (ISO 8601)."),
    until: str | None = typer.Option(None, "--until", help="Only posts up to this time."),
    match: Match = typer.Option(
        Match.MEANING,
        "--match",
        help="Find them by meaning (the text's embedding), by the words they share (hashtags, "
        "@mentions and numbers included; BM25) or both, fused by rank.",
    ),
    as_json: bool = typer.Option(False, "--json", help="Print JSON."),
    wide: bool = typer.Option(
        False, "--wide", help="Wrap post texts in full instead of cutting them to the terminal's width."
    ),
) -> None:
    """The past posts most similar to a draft, with their metrics."""
    found = workspace().precedents(
        text,
        k=k,
        match=match,
        account=account,
        since=_time_opt(since, "--since"),
        until=_time_opt(until, "--until"),
    )
    if as_json:
        print_json(Precedents(precedents=found).model_dump(mode="json"))
    else:
        print_precedents(found, wide=wide)


MIN_TOKEN_CHARS = 32


def check_bind(host: str, settings: Settings) -> None:
    """Refuse a non-loopback address without a token: the store is the team's."""
    try:
        loopback = host == "localhost" or ipaddress.ip_address(host).is_loopback
    except ValueError:
        loopback = False
    # A blank or whitespace token is no token (32 spaces are no secret).
    token = settings.token.get_secret_value().strip() if settings.token else ""
    if not loopback and not token:
        raise InputError(
            f"refusing to listen on {host} without SOUNDING_TOKEN",
            hint="set SOUNDING_TOKEN, or use --host 127.0.0.1",
        )
    # Anyone on the network may try tokens: a short one can be guessed.
    if not loopback and len(token) < MIN_TOKEN_CHARS:
        raise InputError(
            f"refusing to listen on {host}: SOUNDING_TOKEN has fewer than {MIN_TOKEN_CHARS} characters",
            hint="use a long random token, e.g. `python -c 'import secrets; "
            "print(secrets.token_urlsafe(32))'`",
        )


@app.command("serve")
def serve_cmd(
    host: str = typer.Option("127.0.0.1", "--host", help="Address to listen on."),
    port: int = typer.Option(8000, "--port", help="Port to listen on."),
) -> None:
    """Run the HTTP service (the page at /, API docs at /docs)."""
    import uvicorn  # the server, only when serving

    from service.api import guard
    from service.api.app import create_app

    ws = workspace(create=True)
    check_bind(host, ws.settings)
    out.print(f"serving {ws.settings.resolved_home} on http://{host}:{port}/  (API docs: /docs)")
    uvicorn.run(
        create_app(workspace=ws, bound_host=host),
        host=host,
        port=port,
        log_level="info",
        http=guard.protocol(ws.settings),
        timeout_keep_alive=ws.settings.keep_alive_seconds,
    )


@app.command("demo")
def demo_cmd(
    csv_file: Path = typer.Option(DEMO_DIR / "posts.csv", "--csv", help="Demo history CSV."),
    train: bool = typer.Option(True, "--train/--no-train", help="Also train and forecast."),
) -> None:
    """Run the whole job on the bundled demo history in an empty data directory."""
    ws = workspace(create=True)
    if ws.store.counts()["posts"]:
        raise InputError(
            f"the data directory {ws.settings.resolved_home} already holds posts; "
            "the demo wants an empty one",
            hint="use --home with a new directory, or SOUNDING_HOME",
        )
    for handle, name, tz in _demo_accounts():
        ws.store.set_account(handle, display_name=name, timezone=tz)
    out.rule("1. import the demo history")
    print_summary(ws.import_csv(csv_file))
    index = ws.index()
    out.print(f"index ready: {index.ntotal} posts")
    draft = (DEMO_DIR / "sample_draft.txt").read_text().strip()
    out.rule("2. precedents of a sample draft")
    out.print(f"draft: {draft}")
    print_precedents(ws.precedents(draft, k=5))
    if train:
        demo_forecast(ws, draft)  # the forecasting part of the demo


def _demo_accounts() -> list[tuple[str, str, str]]:
    effects = DEMO_DIR / "effects.json"
    if effects.exists():
        data = json.loads(effects.read_text())
        accs = data.get("accounts")
        if isinstance(accs, dict):
            return [
                (h, v.get("display_name", h), v.get("timezone", v.get("zone", "UTC")))
                for h, v in accs.items()
            ]
        if isinstance(accs, list):
            return [(a["handle"], a.get("display_name", a["handle"]), a.get("timezone", "UTC")) for a in accs]
    return []
