"""Precedents: past posts similar to a draft, with their current metrics."""

from __future__ import annotations

from datetime import datetime, timedelta
from typing import Any

from pydantic import BaseModel, Field

from service.answers import Instant, MetricValues, Round4
from service.clock import now_utc
from service.storage.store import Store


class Precedent(BaseModel):
    """A past post similar to a draft, with its current metrics."""

    pk: int | None = Field(default=None, exclude=True, description="The post's row id in the store")
    post_id: str
    account: str
    posted_at: Instant
    text: str
    similarity: Round4 = Field(description="Cosine similarity of the post's text to the draft's")
    metrics: MetricValues
    still_gathering: bool = Field(
        description="True while the post's metrics are not final yet (younger than the maturity window)"
    )
    reference: bool = Field(
        default=False,
        description="A reference account's post (a peer's): found by its text, shown without metrics",
    )
    followers: int | None = Field(
        default=None, description="The account's follower count at the post's time, where one is known"
    )
    has_link: bool = Field(default=False, exclude=True)
    has_media: bool = Field(default=False, exclude=True)


class WeightedPrecedent(Precedent):
    """A precedent shown with a forecast, with its weight in the forecast's features."""

    weight: Round4 = Field(description="Share in the similarity-weighted mean of the precedents")


class Precedents(BaseModel):
    """The answer of a precedents search, most similar first."""

    precedents: list[Precedent]


def precedents_for(
    store: Store,
    hits: list[tuple[int, float]],
    *,
    maturity_hours: float,
    now: datetime | None = None,
    details: dict[int, dict[str, Any]] | None = None,
) -> list[Precedent]:
    """Precedents for (post row id, similarity) hits; ``details`` may pass
    rows already read from the store."""
    if details is None:
        details = store.posts_by_pk([p for p, _ in hits])
    cutoff = (now or now_utc()) - timedelta(hours=maturity_hours)
    out = []
    for pk, sim in hits:
        d = details.get(pk)
        if d is None:  # deleted between search and lookup
            continue
        out.append(
            Precedent(
                pk=pk,
                post_id=d["post_id"],
                account=d["account"],
                posted_at=d["posted_at"],
                text=d["text"],
                similarity=sim,
                metrics=d["metrics"],
                still_gathering=d["posted_at"] > cutoff and not d.get("reference", False),
                reference=bool(d.get("reference", False)),
                followers=d.get("followers"),
                has_link=d["has_link"],
                has_media=d["has_media"],
            )
        )
    return out
