"""Precedents: past posts similar to a draft, with their current metrics."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

from .store import Store
from .timeparse import now_utc


@dataclass(frozen=True, slots=True)
class Precedent:
    """A past post similar to a draft."""

    pk: int
    post_id: str
    account: str
    posted_at: datetime
    text: str
    similarity: float
    metrics: dict[str, int | None]
    mature: bool
    has_link: bool = False
    has_media: bool = False

    def to_dict(self) -> dict[str, Any]:
        return {
            "post_id": self.post_id,
            "account": self.account,
            "posted_at": self.posted_at.isoformat(),
            "text": self.text,
            "similarity": round(self.similarity, 4),
            "metrics": self.metrics,
            "still_gathering": not self.mature,
        }


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
                mature=d["posted_at"] <= cutoff,
                has_link=d["has_link"],
                has_media=d["has_media"],
            )
        )
    return out
