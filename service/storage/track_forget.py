"""Forgetting reaches the track record too.

A recorded forecast keeps copies of what it was given with: its top
precedents (post id, account, the start of the text) and, once a post
fulfils it, the draft's own text, which is that post's text. Deleting the
posts alone left all of these readable in ``GET /v1/track-record``. This runs
inside the forget's own transaction (``Store.forget(also=...)``), so the
posts and every copy in the track record go together or not at all, on
SQLite and PostgreSQL alike (portable SQLAlchemy only).

What goes:

- forecasts fulfilled by a forgotten post (their match names it, their text
  is its draft);
- forecasts of the forgotten post's own account with the same normalised text
  (the same vector key), published or not;
- a whole account's forecasts when the account is forgotten;
- every precedent entry naming a forgotten post or account, in any other
  forecast (the forecast itself stays: it is another post's record).

Matches are deleted by statement, not left to the database's cascade, so the
scoring counter moves and cached live coverage is recomputed.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass

from sqlalchemy import delete, or_, select, update
from sqlalchemy.orm import Session

from service.storage.tables import ForecastGiven, ForecastMatch

CHUNK = 900  # bound parameters per statement (SQLite's default limit is 999)


@dataclass(frozen=True, slots=True)
class Gone:
    """A post about to be forgotten."""

    pk: int
    vector_key: str
    post_id: str
    account: str
    account_id: int


def _chunks(items: Sequence[object]) -> list[list[object]]:
    return [list(items[i : i + CHUNK]) for i in range(0, len(items), CHUNK)]


def _drop_forecasts(s: Session, ids: set[int]) -> None:
    for chunk in _chunks(sorted(ids)):
        s.execute(delete(ForecastMatch).where(ForecastMatch.forecast_id.in_(chunk)))
        s.execute(delete(ForecastGiven).where(ForecastGiven.id.in_(chunk)))


def scrub_track_record(
    s: Session, rows: Sequence[tuple[int, str, str, str, int]], *, account: tuple[int, str] | None = None
) -> int:
    """Remove the posts of ``rows`` (``Store.forget``'s: row id, vector key,
    post id, handle, account row id) and ``account`` (row id, handle, when a
    whole account goes) from the track record; returns how many forecasts
    were changed or deleted."""
    gone = [Gone(*r) for r in rows]
    if not gone and account is None:
        return 0
    doomed: set[int] = set()
    pks = [g.pk for g in gone]
    for chunk in _chunks(pks):
        doomed.update(s.scalars(select(ForecastMatch.forecast_id).where(ForecastMatch.post_pk.in_(chunk))))
    if account is not None:
        doomed.update(s.scalars(select(ForecastGiven.id).where(ForecastGiven.account_id == account[0])))
    else:
        by_account: dict[int, set[str]] = {}
        for g in gone:
            by_account.setdefault(g.account_id, set()).add(g.vector_key)
        for acc_id, keys in by_account.items():
            for chunk in _chunks(sorted(keys)):
                doomed.update(
                    s.scalars(
                        select(ForecastGiven.id).where(
                            ForecastGiven.account_id == acc_id, ForecastGiven.text_hash.in_(chunk)
                        )
                    )
                )
    for chunk in _chunks(pks):
        s.execute(delete(ForecastMatch).where(ForecastMatch.post_pk.in_(chunk)))
    _drop_forecasts(s, doomed)
    return len(doomed) + _scrub_precedents(s, gone, account=None if account is None else account[1])


def _scrub_precedents(s: Session, gone: Sequence[Gone], *, account: str | None) -> int:
    """Drop precedent entries naming a forgotten post (or account) from the
    forecasts that remain."""
    names = {(g.account, g.post_id) for g in gone}
    # A cheap pre-filter in SQL (the quoted id or handle as it is written in
    # the JSON), then the exact test on the parsed entries.
    if account is not None:
        needles = [json.dumps(account, ensure_ascii=False)]
    else:
        needles = sorted({json.dumps(g.post_id, ensure_ascii=False) for g in gone})
    changed = 0
    for chunk in _chunks(needles):
        cond = or_(*(ForecastGiven.precedents.contains(str(n), autoescape=True) for n in chunk))
        for fid, raw in s.execute(select(ForecastGiven.id, ForecastGiven.precedents).where(cond)).all():
            entries = json.loads(raw or "[]")
            kept = [
                e
                for e in entries
                if (e.get("account"), e.get("post_id")) not in names
                and (account is None or e.get("account") != account)
            ]
            if len(kept) != len(entries):
                s.execute(
                    update(ForecastGiven)
                    .where(ForecastGiven.id == fid)
                    .values(precedents=json.dumps(kept, ensure_ascii=False))
                )
                changed += 1
    return changed
