"""Commands for the history store: accounts, import, index, precedents, serve, demo."""

from __future__ import annotations

import ipaddress
import os
from dataclasses import asdict
from datetime import datetime
from pathlib import Path

import typer
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeRemainingColumn
from rich.table import Table

from models.errors import InputError

from ..importer import ImportSummary, parse_mapping
from ..settings import Settings
from ..timeparse import parse_time
from .base import app, err, is_terminal, out, print_json, workspace

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
) -> None:
    """Create or update an account."""
    a = workspace().store.set_account(handle, display_name=name, timezone=timezone)
    out.print(f"{a.handle}: {a.display_name or '(no name)'}, {a.timezone}, {a.posts} posts")


@app.command("accounts")
def accounts_cmd(as_json: bool = typer.Option(False, "--json", help="Print JSON.")) -> None:
    """List the accounts in the store."""
    rows = workspace().store.accounts()
    if as_json:
        print_json([asdict(a) for a in rows])
        return
    t = Table("handle", "name", "time zone", "posts")
    for a in rows:
        t.add_row(a.handle, a.display_name or "", a.timezone, str(a.posts))
    out.print(t)


def print_summary(s: ImportSummary, *, limit: int = 20) -> None:
    for p in s.problems[:limit]:
        err.print(f"rejected {p}", highlight=False, markup=False)
    if len(s.problems) > limit:
        err.print(f"... and {len(s.problems) - limit} more rejected rows")
    out.print(
        f"added {s.added}, updated {s.updated}, unchanged {s.unchanged}, rejected {s.rejected}"
        f" (embedded {s.embedded} new texts)"
    )


@app.command("import")
def import_cmd(
    file: Path = typer.Argument(..., help="CSV file in our canonical columns (or mapped)."),
    account: str | None = typer.Option(
        None, "--account", help="Account for rows without an account column."
    ),
    mapping: list[str] = typer.Option(
        [], "--map", help="Read our column from theirs: ours=theirs (repeatable)."
    ),
    timezone: str | None = typer.Option(
        None, "--timezone", help="IANA zone of times without an offset (default: the account's)."
    ),
    as_json: bool = typer.Option(False, "--json", help="Print the summary as JSON."),
) -> None:
    """Import past posts and their metrics from a CSV file."""
    ws = workspace()
    maps = parse_mapping(mapping)
    if is_terminal() and not as_json:
        cols = (TextColumn("importing"), BarColumn(), MofNCompleteColumn(), TimeRemainingColumn())
        with Progress(*cols, console=out, transient=True) as bar:
            task = bar.add_task("import", total=None)

            def progress(done: int, total: int) -> None:
                bar.update(task, completed=done, total=total)

            summary = ws.import_csv(file, account=account, mapping=maps, timezone=timezone,
                                    progress=progress)
    else:
        summary = ws.import_csv(file, account=account, mapping=maps, timezone=timezone)
    if as_json:
        print_json(summary.to_dict())
    else:
        print_summary(summary)


@app.command("reindex")
def reindex_cmd() -> None:
    """Rebuild the search index from the vectors in the store."""
    index = workspace().reindex()
    cfg = index.config()
    how = (f"HNSW graph, efSearch {cfg['ef_search']}, recall@10 {cfg['recall_at_10']:.3f} "
           f"against exact search on {cfg['recall_sample']} of its own vectors"
           if cfg["approximate"] else "exact search")
    out.print(f"index rebuilt: {index.ntotal} posts ({how})")


def _time_opt(value: str | None, name: str) -> datetime | None:
    return parse_time(value, tz="UTC", where=name) if value else None


def print_precedents(found: list, *, title: str = "precedents") -> None:
    t = Table("sim", "account", "posted", "impressions", "engagements", "text", title=title)
    for p in found:
        flag = "" if p.mature else " (young)"
        t.add_row(
            f"{p.similarity:.2f}", p.account, p.posted_at.strftime("%Y-%m-%d %H:%M") + flag,
            _n(p.metrics.get("impressions")), _n(p.metrics.get("engagements")),
            p.text if len(p.text) <= 90 else p.text[:87] + "...",
        )
    out.print(t)


def _n(v: int | None) -> str:
    return "-" if v is None else f"{v:,}"


@app.command("precedents")
def precedents_cmd(
    text: str = typer.Argument(..., help="The draft."),
    account: str | None = typer.Option(None, "--account", help="Only this account's posts."),
    k: int = typer.Option(10, "-k", "--count", help="How many precedents."),
    since: str | None = typer.Option(None, "--since", help="Only posts from this time (ISO 8601)."),
    until: str | None = typer.Option(None, "--until", help="Only posts up to this time."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON."),
) -> None:
    """The past posts most similar to a draft, with their metrics."""
    found = workspace().precedents(
        text, k=k, account=account, since=_time_opt(since, "--since"),
        until=_time_opt(until, "--until"),
    )
    if as_json:
        print_json({"precedents": [p.to_dict() for p in found]})
    else:
        print_precedents(found)


def check_bind(host: str, settings: Settings) -> None:
    """Refuse a non-loopback address without a token: the store is the team's."""
    try:
        loopback = host == "localhost" or ipaddress.ip_address(host).is_loopback
    except ValueError:
        loopback = False
    if not loopback and not settings.token:
        raise InputError(
            f"refusing to listen on {host} without SOUNDING_TOKEN",
            hint="set SOUNDING_TOKEN, or use --host 127.0.0.1",
        )


@app.command("serve")
def serve_cmd(
    host: str = typer.Option("127.0.0.1", "--host", help="Address to listen on."),
    port: int = typer.Option(8000, "--port", help="Port to listen on."),
) -> None:
    """Run the HTTP service (review page at /, API docs at /docs)."""
    import uvicorn

    from ..api.app import create_app

    ws = workspace()
    check_bind(host, ws.settings)
    out.print(f"serving {ws.settings.resolved_home} on http://{host}:{port}/  (API docs: /docs)")
    uvicorn.run(create_app(workspace=ws), host=host, port=port, log_level="info")


@app.command("demo")
def demo_cmd(
    csv_file: Path = typer.Option(DEMO_DIR / "posts.csv", "--csv", help="Demo history CSV."),
    train: bool = typer.Option(True, "--train/--no-train", help="Also train and forecast."),
) -> None:
    """Run the whole job on the bundled demo history in an empty data directory."""
    ws = workspace()
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
        from .forecast import demo_forecast  # the forecasting part of the demo

        demo_forecast(ws, draft)


def _demo_accounts() -> list[tuple[str, str, str]]:
    import json

    effects = DEMO_DIR / "effects.json"
    if effects.exists():
        data = json.loads(effects.read_text())
        accs = data.get("accounts")
        if isinstance(accs, dict):
            return [(h, v.get("display_name", h), v.get("timezone", v.get("zone", "UTC")))
                    for h, v in accs.items()]
        if isinstance(accs, list):
            return [(a["handle"], a.get("display_name", a["handle"]), a.get("timezone", "UTC"))
                    for a in accs]
    return []
