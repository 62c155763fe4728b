"""The screen of ``check --accounts``: the draft's forecast for each account,
best first, with what sets each apart."""

from __future__ import annotations

from datetime import datetime

from service.account_choice import AccountChoice
from service.answers import value_text
from service.cli.base import out
from service.cli.prose import say
from service.cli.render import Column, print_table


def _local(text: str) -> str:
    """A local time as 'Thu 12:00' (the offset is in --json and --details)."""
    return f"{datetime.fromisoformat(text):%a %H:%M}"


def print_choice(c: AccountChoice, *, details: bool = False) -> None:
    held = (
        "not yet tried on past posts"
        if c.backtested_coverage is None
        else f"held in {c.backtested_coverage:.0%} of past tries"
    )
    say(out, f"{c.metric} of this draft for each account; {c.coverage:.0%} intervals, {held}")
    say(out, c.summary)
    cols = [
        Column(header="rank", right=True),
        Column(header="account", free=True),
        # The wall-clock time is the same in every zone unless a time with an offset was given.
        Column(header="local time", optional=True),
        Column(header="low", right=True),
        Column(header="median", right=True),
        Column(header="high", right=True),
        Column(header="tied with the best"),
    ]
    rows = [
        [
            str(r.rank),
            r.account,
            _local(r.local_time),
            value_text(r.low, c.metric),
            value_text(r.median, c.metric),
            value_text(r.high, c.metric),
            "yes" if r.tied_with_best else "no",
        ]
        for r in c.accounts
    ]
    print_table(out, cols, rows, title="accounts, best first")
    out.print("what sets each apart:", highlight=False)
    for r in c.accounts:
        say(out, f"{r.rank}. {r.reason}", indent="  ", hanging="     ")
    for w in c.left_out:
        say(out, f"left out: {w}", hanging="  ", style="yellow")
    if details:
        say(out, f"rule: {c.rule}; similar: cosine similarity >= {c.similarity_threshold:.2f}")
        for r in c.accounts:
            say(
                out,
                f"{r.account} at {r.local_time}: log1p band {r.log1p_low:.3f} / "
                f"{r.log1p_median:.3f} / {r.log1p_high:.3f}"
                + (f"; about equal to {', '.join(r.tied_with)}" if r.tied_with else ""),
                indent="  ",
                hanging="    ",
            )
    say(out, c.note, style="dim")
    say(out, c.caution, style="dim")
