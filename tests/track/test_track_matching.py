"""Matching published posts to the forecasts they fulfil (service.track.record).

The rules come from issue 11 (explicit draft id first; else same account, text
similarity at or above the threshold and a posting time within the window;
one post fulfils at most one forecast, the latest given before it was posted;
a forecast given after the post never counts; idempotent; forget removes
matches). Every case below is built by hand so the right answer is known
without running our code; common practice, no source beyond the issue.
"""

from __future__ import annotations

from datetime import datetime, timedelta
from pathlib import Path

import pytest
from sqlalchemy import func, select

from service.clock import UTC, to_naive_utc
from service.ingest.options import ImportOptions
from service.storage.tables import Account, ForecastGiven, ForecastMatch, Post
from service.workspace import Workspace

T0 = datetime(2026, 6, 1, 12, 0, tzinfo=UTC)

HISTORY = [  # one old post per account, so the accounts exist
    ("h1", "garden", "Opening hours change for the summer season", T0 - timedelta(days=30)),
    ("h2", "lab", "Our seed bank volunteers met today", T0 - timedelta(days=30)),
]

LANTERN_FRI = (
    "The Lantern Trail opens on Friday evening with music, hot drinks and a lit "
    "glasshouse. Tickets on our site."
)
LANTERN_SAT = (
    "The Lantern Trail opens on Saturday evening with music, hot drinks and a lit "
    "glasshouse. Tickets on our site."
)
ROSES = "The rose garden is at its best this week: come early for the scent and the light."
ROSES_EDITED = "The rose garden is at its best this week: come early for the scent and the light. #GardenWalk"
FERNS = "Behind the scenes: relabelling every fern in the glasshouse collection."


def _csv(path: Path, rows: list[tuple], *, draft_col: str | None = None) -> Path:
    head = "post_id,account,text,posted_at,impressions" + (f",{draft_col}" if draft_col else "")
    lines = [head]
    for r in rows:
        pid, acc, text, when, *rest = r
        cells = [pid, acc, '"' + text.replace('"', '""') + '"', when.isoformat(), "100"]
        if draft_col:
            cells.append(rest[0] if rest else "")
        lines.append(",".join(cells))
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def _given(
    ws: Workspace,
    *,
    text: str,
    account: str,
    planned: datetime,
    given: datetime,
    draft_id: str | None = None,
    metric: str = "impressions",
) -> int:
    """A forecast as the track record keeps it (the numbers do not matter here)."""
    with ws.store.session() as s:
        aid = s.scalar(select(Account.id).where(Account.handle == account))
        f = ForecastGiven(
            given_at=to_naive_utc(given),
            source="check",
            draft_id=draft_id,
            account_id=aid,
            text=text,
            text_hash=ws.embedder.key(text),
            planned_at=to_naive_utc(planned),
            metric=metric,
            coverage=0.8,
            low=50.0,
            median=100.0,
            high=200.0,
            low_log=3.9,
            median_log=4.6,
            high_log=5.3,
            model_version="v",
            calibration="cqr",
            alpha_t=0.2,
            precedents="[]",
        )
        s.add(f)
        s.flush()
        return int(f.id)


def _matches(ws: Workspace) -> dict[int, tuple[str, str]]:
    """forecast id -> (post_id, how)."""
    with ws.store.session() as s:
        rows = s.execute(
            select(ForecastMatch.forecast_id, Post.post_id, ForecastMatch.how).join(
                Post, Post.id == ForecastMatch.post_pk
            )
        ).all()
    return {int(f): (p, h) for f, p, h in rows}


@pytest.fixture()
def ws(workspace: Workspace, tmp_path: Path) -> Workspace:
    workspace.import_csv(_csv(tmp_path / "history.csv", HISTORY), ImportOptions(new_accounts="UTC"))
    return workspace


def test_explicit_draft_id_wins_over_text_and_time(ws: Workspace, tmp_path: Path) -> None:
    f = _given(ws, text=ROSES, account="garden", planned=T0, given=T0 - timedelta(days=1), draft_id="plan-7")
    # Different words and five days late: only the explicit id can link them.
    rows = [("p1", "garden", FERNS, T0 + timedelta(days=5), "plan-7")]
    ws.import_csv(
        _csv(tmp_path / "pub.csv", rows, draft_col="Draft"),
        ImportOptions(mapping={"draft_id": "Draft"}, new_accounts="UTC"),
    )
    assert _matches(ws) == {f: ("p1", "draft_id")}


def test_text_and_time_match_and_their_limits(ws: Workspace, tmp_path: Path) -> None:
    near = _given(ws, text=ROSES, account="garden", planned=T0, given=T0 - timedelta(hours=5))
    late = _given(ws, text=FERNS, account="garden", planned=T0, given=T0 - timedelta(hours=5))
    other = _given(ws, text=ROSES, account="lab", planned=T0, given=T0 - timedelta(hours=5))
    rows = [
        ("p1", "garden", ROSES_EDITED, T0 + timedelta(minutes=20)),  # light edit, on time
        ("p2", "garden", FERNS, T0 + timedelta(days=4)),  # same text, outside the 48 h window
    ]
    ws.import_csv(_csv(tmp_path / "pub.csv", rows), ImportOptions(new_accounts="UTC"))
    got = _matches(ws)
    assert got.get(near) == ("p1", "text_time")
    assert late not in got  # too far from its planned time
    assert other not in got  # another account's forecast never matches


def test_near_duplicate_drafts_each_find_their_own_post(ws: Workspace, tmp_path: Path) -> None:
    fri = _given(ws, text=LANTERN_FRI, account="garden", planned=T0, given=T0 - timedelta(days=1))
    sat = _given(
        ws,
        text=LANTERN_SAT,
        account="garden",
        planned=T0 + timedelta(hours=2),
        given=T0 - timedelta(hours=20),
    )
    # The same draft checked twice: the later check is the one that counts.
    again_1 = _given(
        ws, text=ROSES, account="garden", planned=T0 + timedelta(hours=3), given=T0 - timedelta(hours=10)
    )
    again_2 = _given(
        ws, text=ROSES, account="garden", planned=T0 + timedelta(hours=3), given=T0 - timedelta(hours=2)
    )
    rows = [
        ("p-fri", "garden", LANTERN_FRI, T0 + timedelta(minutes=5)),
        ("p-sat", "garden", LANTERN_SAT, T0 + timedelta(hours=2, minutes=5)),
        ("p-rose", "garden", ROSES, T0 + timedelta(hours=3)),
    ]
    ws.import_csv(_csv(tmp_path / "pub.csv", rows), ImportOptions(new_accounts="UTC"))
    got = _matches(ws)
    assert got[fri][0] == "p-fri" and got[sat][0] == "p-sat"
    assert got[again_2][0] == "p-rose" and again_1 not in got  # one post, one forecast


def test_post_published_before_the_forecast_never_matches(ws: Workspace, tmp_path: Path) -> None:
    after = _given(
        ws, text=ROSES, account="garden", planned=T0, given=T0 + timedelta(hours=1), draft_id="d-1"
    )
    rows = [("p1", "garden", ROSES, T0, "d-1")]  # out at T0, forecast given an hour later
    ws.import_csv(_csv(tmp_path / "pub.csv", rows, draft_col="draft_id"), ImportOptions(new_accounts="UTC"))
    assert after not in _matches(ws)


def test_reimport_is_idempotent_and_forget_removes_matches(ws: Workspace, tmp_path: Path) -> None:
    f1 = _given(ws, text=ROSES, account="garden", planned=T0, given=T0 - timedelta(hours=3))
    f2 = _given(ws, text=FERNS, account="lab", planned=T0, given=T0 - timedelta(hours=3))
    pub = _csv(
        tmp_path / "pub.csv",
        [("p1", "garden", ROSES, T0 + timedelta(minutes=3)), ("p2", "lab", FERNS, T0 + timedelta(minutes=9))],
    )
    ws.import_csv(pub, ImportOptions(new_accounts="UTC"))
    first = _matches(ws)
    assert set(first) == {f1, f2}
    ws.import_csv(pub, ImportOptions(new_accounts="UTC"))
    ws.import_csv(pub, ImportOptions(new_accounts="UTC"))
    assert _matches(ws) == first
    with ws.store.session() as s:
        assert s.scalar(select(func.count(ForecastMatch.id))) == 2
    ws.forget(post_id="p1", account="garden")
    assert set(_matches(ws)) == {f2}
    ws.forget(account="lab")
    with ws.store.session() as s:
        assert s.scalar(select(func.count(ForecastMatch.id))) == 0
        # The account's forecasts go with it, and a forgotten post takes the forecast
        # it fulfilled (that forecast holds the post's own words): none is left.
        assert s.scalar(select(func.count(ForecastGiven.id))) == 0
    # Re-importing the forgotten post finds no forecast to match: forgotten means forgotten.
    ws.import_csv(pub, ImportOptions(new_accounts="UTC"))
    assert not _matches(ws)
