"""The screen of ``accounts --details``: the team's accounts side by side."""

from __future__ import annotations

from service.analysis.team import TeamOverview
from service.answers import value_text
from service.cli.base import out
from service.cli.prose import say
from service.cli.render import Column, print_table


def print_team(t: TeamOverview) -> None:
    metric = t.metric.replace("_", " ")
    rows = [
        [
            a.account,
            f"{a.settled:,}",
            f"{a.share:.0%}",
            "-" if a.first_post is None else f"{a.first_post:%Y-%m-%d}",
            "-" if a.last_post is None else f"{a.last_post:%Y-%m-%d}",
            "-" if a.median is None else value_text(a.median, t.metric),
        ]
        for a in t.accounts
    ]
    print_table(
        out,
        [
            Column(header="account"),
            Column(header="posts", right=True),
            Column(header="share", right=True),
            Column(header="first"),
            Column(header="last"),
            Column(header="median", right=True),
        ],
        rows,
        title=f"the team's accounts: {t.n_posts:,} settled posts with {metric}",
    )
    for a in t.accounts:
        say(out, f"{a.account} ({a.timezone})")
        for line in a.lines:
            say(out, f"- {line}", indent="  ", hanging="    ")
    say(out, t.note, style="dim")
