"""A segments answer: each split's segments with their statistics, example
posts, what was left out, and the note that these are associations."""

from __future__ import annotations

from collections.abc import Mapping
from datetime import datetime

import numpy as np
from pydantic import BaseModel, Field, PrivateAttr, field_serializer

from models.errors import InputError
from models.segments import Num, SegmentReport, SegmentStats
from models.two_way import TwoWayTable
from service.segments.request import NOTE, Topic


class Example(BaseModel):
    """A post that a topic phrase caught, to show what the phrase means."""

    post_id: str
    account: str
    posted_at: datetime
    text: str
    similarity: float = Field(description="Cosine similarity to the topic's phrase(s)")
    value: Num = Field(description="The post's value of the metric (none for a reference post)")
    reference: bool = Field(
        default=False,
        description="A reference account's post (a peer's): shown for its text, counted in no segment",
    )

    @field_serializer("similarity")
    def _rounded(self, similarity: float) -> float:
        return round(similarity, 4)  # four places tell posts apart; more is noise


class SplitSegment(SegmentStats):
    """One segment of a split, with the posts that show a topic's meaning."""

    examples: list[Example] | None = Field(
        default=None,
        description="Topic splits only: the posts most similar to the phrase; "
        "for 'other', the posts closest to a topic that still missed",
    )


class Split(SegmentReport):
    """One one-way split: the statistics of its segments, what they were
    split by, and (kept out of the JSON) what the figure needs: the values
    and the per-post labels or overlapping groups."""

    by: str = Field(description="topic, or the by of the request")
    title: str
    mode: str | None = None
    threshold: float | None = None
    k: int | None = None
    topics: list[Topic] | None = None
    match: str | None = Field(
        default=None, description="Topic splits: how posts joined topics (meaning, words or both)"
    )
    segments: list[SplitSegment]

    _values: np.ndarray = PrivateAttr(default_factory=lambda: np.zeros(0))
    _labels: np.ndarray | Mapping[str, np.ndarray] = PrivateAttr(default_factory=dict)

    @classmethod
    def of(
        cls,
        report: SegmentReport,
        *,
        by: str,
        title: str,
        values: np.ndarray,
        labels: np.ndarray | Mapping[str, np.ndarray],
        examples: Mapping[str, list[Example]] | None = None,
        mode: str | None = None,
        threshold: float | None = None,
        k: int | None = None,
        topics: list[Topic] | None = None,
        match: str | None = None,
    ) -> Split:
        """The split of ``report``; ``examples`` (by segment name) for topics."""
        segments = [
            SplitSegment(
                **seg.model_dump(exclude={"note"}),
                examples=None if examples is None else examples.get(seg.name, []),
            )
            for seg in report.segments
        ]
        split = cls(
            **report.model_dump(exclude={"segments"}),
            segments=segments,
            by=by,
            title=title,
            mode=mode,
            threshold=threshold,
            k=k,
            topics=topics,
            match=match,
        )
        split._values, split._labels = values, labels
        return split

    def segment(self, name: str) -> SplitSegment:
        for seg in self.segments:
            if seg.name == name:
                return seg
        raise KeyError(name)

    @property
    def values(self) -> np.ndarray:
        """The metric of each post in the split."""
        return self._values

    @property
    def labels(self) -> np.ndarray | Mapping[str, np.ndarray]:
        """Each post's segment, or (overlapping segments) each segment's post rows."""
        return self._labels


class LeftOut(BaseModel):
    no_metric: int = Field(description="Posts without the metric")
    still_gathering: int = Field(
        description="Posts whose metrics are not final yet (younger than the maturity window)"
    )
    no_followers: int = Field(
        default=0,
        description="Of no_metric: posts without a follower count in force at their time "
        "(a per-follower metric is missing for them, not guessed)",
    )


class SegmentResult(BaseModel):
    """The answer to a segments request (HTTP, CLI ``--json`` and page alike)."""

    metric: str
    account: str | None
    n_posts: int
    left_out: LeftOut
    splits: list[Split]
    two_way: TwoWayTable | None = None
    warnings: list[str] = Field(default_factory=list)
    note: str = NOTE

    def split(self, by: str) -> Split:
        for s in self.splits:
            if s.by == by:
                return s
        raise InputError(
            f"there is no {by!r} split here; this answer has {', '.join(s.by for s in self.splits)}",
            field="plot",
            value=by,
        )
