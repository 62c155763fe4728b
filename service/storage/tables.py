"""SQLAlchemy tables of the store.

These are storage rows only; the API's pydantic schemas live apart in
``service.api.schemas``. Times are stored as naive UTC (SQLite has no time
zone type); ``service.storage.store`` attaches UTC on the way out.
"""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import (
    BigInteger,
    Boolean,
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    String,
    Text,
    UniqueConstraint,
    false,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column, relationship


class Base(DeclarativeBase):
    pass


#: The longest label name or value (a column header, a campaign's name).
LABEL_CHARS = 200


class Account(Base):
    __tablename__ = "accounts"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    handle: Mapped[str] = mapped_column(String(200), unique=True, nullable=False)
    display_name: Mapped[str | None] = mapped_column(String(400))
    # IANA zone name; the local hour of a post is read in it.
    timezone: Mapped[str] = mapped_column(String(64), nullable=False, default="UTC")
    created_at: Mapped[datetime] = mapped_column(DateTime, nullable=False)
    # A reference account (a peer's): its posts are searched (precedents,
    # near-repeats, topic examples) but never measured, learnt from or scored.
    reference: Mapped[bool] = mapped_column(Boolean, nullable=False, default=False, server_default=false())

    posts: Mapped[list[Post]] = relationship(
        back_populates="account", cascade="all, delete-orphan", passive_deletes=True
    )


class Post(Base):
    __tablename__ = "posts"
    __table_args__ = (
        UniqueConstraint("account_id", "post_id", name="uq_post_per_account"),
        Index("ix_posts_posted_at", "posted_at"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    account_id: Mapped[int] = mapped_column(ForeignKey("accounts.id", ondelete="CASCADE"), nullable=False)
    post_id: Mapped[str] = mapped_column(String(200), nullable=False)
    text: Mapped[str] = mapped_column(Text, nullable=False)
    # Key of the text's vector in `vectors` (hash of model id + normalised text).
    vector_key: Mapped[str] = mapped_column(String(64), nullable=False, index=True)
    posted_at: Mapped[datetime] = mapped_column(DateTime, nullable=False)
    has_link: Mapped[bool] = mapped_column(Boolean, nullable=False)
    has_media: Mapped[bool] = mapped_column(Boolean, nullable=False, default=False)
    imported_at: Mapped[datetime] = mapped_column(DateTime, nullable=False)
    # Last change of text, time or metrics; with the row count and max id it
    # tells another process (the service) that its index may be stale.
    updated_at: Mapped[datetime] = mapped_column(DateTime, nullable=False, index=True)

    account: Mapped[Account] = relationship(back_populates="posts")
    snapshots: Mapped[list[Snapshot]] = relationship(
        back_populates="post",
        cascade="all, delete-orphan",
        passive_deletes=True,
        order_by="Snapshot.id",
    )


class Snapshot(Base):
    """Metrics of a post as seen at one time; the latest one is current."""

    __tablename__ = "snapshots"
    __table_args__ = (Index("ix_snapshots_post", "post_pk", "id"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    post_pk: Mapped[int] = mapped_column(ForeignKey("posts.id", ondelete="CASCADE"), nullable=False)
    captured_at: Mapped[datetime] = mapped_column(DateTime, nullable=False)
    impressions: Mapped[int | None] = mapped_column(Integer)
    engagements: Mapped[int | None] = mapped_column(Integer)
    likes: Mapped[int | None] = mapped_column(Integer)
    reposts: Mapped[int | None] = mapped_column(Integer)
    replies: Mapped[int | None] = mapped_column(Integer)
    link_clicks: Mapped[int | None] = mapped_column(Integer)
    profile_clicks: Mapped[int | None] = mapped_column(Integer)

    post: Mapped[Post] = relationship(back_populates="snapshots")


class ApproximateValue(Base):
    """A metric of a snapshot that is known only roughly: written abbreviated
    in the export (1.2K) or derived from a rate. A table of its own, so
    stores made before it gain it without touching existing rows."""

    __tablename__ = "approximate_values"

    snapshot_id: Mapped[int] = mapped_column(ForeignKey("snapshots.id", ondelete="CASCADE"), primary_key=True)
    metric: Mapped[str] = mapped_column(String(32), primary_key=True)


class PostLabel(Base):
    """A team's own label of a post: the value of one extra column of its
    export (a campaign, a series), kept at import with ``--label``."""

    __tablename__ = "post_labels"
    __table_args__ = (Index("ix_post_labels_name", "name", "value"),)

    post_pk: Mapped[int] = mapped_column(ForeignKey("posts.id", ondelete="CASCADE"), primary_key=True)
    name: Mapped[str] = mapped_column(String(LABEL_CHARS), primary_key=True)
    value: Mapped[str] = mapped_column(String(LABEL_CHARS), nullable=False)


class FollowerCount(Base):
    """An account's follower count from a time on: it holds until the account's
    next count (the as-of rule of ``service.storage.followers``)."""

    __tablename__ = "follower_counts"

    account_id: Mapped[int] = mapped_column(ForeignKey("accounts.id", ondelete="CASCADE"), primary_key=True)
    since: Mapped[datetime] = mapped_column(DateTime, primary_key=True)
    followers: Mapped[int] = mapped_column(BigInteger, nullable=False)


class Vector(Base):
    """An embedding, shared by every post whose normalised text is the same."""

    __tablename__ = "vectors"

    key: Mapped[str] = mapped_column(String(64), primary_key=True)
    model_id: Mapped[str] = mapped_column(String(200), nullable=False)
    dim: Mapped[int] = mapped_column(Integer, nullable=False)
    data: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)


class SchemaVersion(Base):
    """The store's schema version (one row); see ``service.storage.migrations``."""

    __tablename__ = "schema_version"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=False)
    version: Mapped[int] = mapped_column(Integer, nullable=False)
    migrated_at: Mapped[datetime] = mapped_column(DateTime, nullable=False)


class ChangeStamp(Base):
    """Counters bumped by write transactions: the cheap way for any process
    sharing the store to tell that something changed. Row ``HISTORY_STAMP``
    moves with the post history (what the index, the history view and the
    account cache derive from); row ``SCORING_STAMP`` with the track
    record's scoring (matches, adaptive calibration state)."""

    __tablename__ = "store_stamp"

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=False)
    counter: Mapped[int] = mapped_column(BigInteger, nullable=False, default=0)


# Track record (service.track.record) --------------------------------
# Forecasts given, what they were matched to and how they scored, and the state
# of the adaptive calibration. Portable types only (SQLite and PostgreSQL).
# Deleting a post or an account cascades to its matches and forecasts.


class ForecastGiven(Base):
    """One forecast as it was given (check, a plan file, the API or the page)."""

    __tablename__ = "forecasts_given"
    __table_args__ = (
        Index("ix_forecasts_given_account_planned", "account_id", "planned_at"),
        Index("ix_forecasts_given_draft", "draft_id"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    given_at: Mapped[datetime] = mapped_column(DateTime, nullable=False, index=True)
    source: Mapped[str] = mapped_column(String(16), nullable=False)  # check, plan, api
    draft_id: Mapped[str | None] = mapped_column(String(200))
    account_id: Mapped[int] = mapped_column(ForeignKey("accounts.id", ondelete="CASCADE"), nullable=False)
    text: Mapped[str] = mapped_column(Text, nullable=False)
    text_hash: Mapped[str] = mapped_column(String(64), nullable=False)
    planned_at: Mapped[datetime] = mapped_column(DateTime, nullable=False)
    metric: Mapped[str] = mapped_column(String(32), nullable=False)
    coverage: Mapped[float] = mapped_column(Float, nullable=False)
    low: Mapped[float] = mapped_column(Float, nullable=False)
    median: Mapped[float] = mapped_column(Float, nullable=False)
    high: Mapped[float] = mapped_column(Float, nullable=False)
    # The band on the model's log1p scale, as given (scoring compares on it).
    low_log: Mapped[float] = mapped_column(Float, nullable=False)
    median_log: Mapped[float] = mapped_column(Float, nullable=False)
    high_log: Mapped[float] = mapped_column(Float, nullable=False)
    model_version: Mapped[str] = mapped_column(String(64), nullable=False)
    calibration: Mapped[str] = mapped_column(String(32), nullable=False)  # cqr or cqr+aci
    alpha_t: Mapped[float] = mapped_column(Float, nullable=False)
    # The simple forecasters as they stood when the forecast was given (log1p scale).
    account_median_log: Mapped[float | None] = mapped_column(Float)
    precedents_median_log: Mapped[float | None] = mapped_column(Float)
    # JSON list of the top precedents: post_id, account, similarity, value.
    precedents: Mapped[str] = mapped_column(Text, nullable=False, default="[]")


class PostDraftLink(Base):
    """An explicit draft id that an import gave a post (its ``draft_id`` column)."""

    __tablename__ = "post_draft_links"

    post_pk: Mapped[int] = mapped_column(ForeignKey("posts.id", ondelete="CASCADE"), primary_key=True)
    draft_id: Mapped[str] = mapped_column(String(200), nullable=False, index=True)


class ForecastMatch(Base):
    """A forecast fulfilled by a published post, and its score once settled.

    One post fulfils at most one forecast of a metric, one forecast at most one post.
    """

    __tablename__ = "forecast_matches"
    __table_args__ = (UniqueConstraint("post_pk", "metric", name="uq_match_post_metric"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    forecast_id: Mapped[int] = mapped_column(
        ForeignKey("forecasts_given.id", ondelete="CASCADE"), nullable=False, unique=True
    )
    post_pk: Mapped[int] = mapped_column(
        ForeignKey("posts.id", ondelete="CASCADE"), nullable=False, index=True
    )
    metric: Mapped[str] = mapped_column(String(32), nullable=False)
    how: Mapped[str] = mapped_column(String(16), nullable=False)  # draft_id or text_time
    similarity: Mapped[float | None] = mapped_column(Float)
    matched_at: Mapped[datetime] = mapped_column(DateTime, nullable=False)
    # Filled once the post is settled (maturity window), refreshed on later imports.
    outcome: Mapped[float | None] = mapped_column(Float)
    outcome_log: Mapped[float | None] = mapped_column(Float)
    inside: Mapped[bool | None] = mapped_column(Boolean)
    scored_at: Mapped[datetime | None] = mapped_column(DateTime)
    # Whether this outcome has been fed to the adaptive calibration (once only).
    adapted: Mapped[bool] = mapped_column(Boolean, nullable=False, default=False)


class CalibrationState(Base):
    """Adaptive conformal state (alpha_t) of one metric and coverage level.

    Not tied to a model version: retraining keeps what the adaptation learnt.
    """

    __tablename__ = "calibration_states"

    metric: Mapped[str] = mapped_column(String(32), primary_key=True)
    level: Mapped[str] = mapped_column(String(8), primary_key=True)  # "0.8"
    alpha_t: Mapped[float] = mapped_column(Float, nullable=False)
    gamma: Mapped[float] = mapped_column(Float, nullable=False)
    real_updates: Mapped[int] = mapped_column(Integer, nullable=False, default=0)
    pseudo_updates: Mapped[int] = mapped_column(Integer, nullable=False, default=0)
    # Posting time of the last settled post fed as a pseudo-outcome.
    pseudo_until: Mapped[datetime | None] = mapped_column(DateTime)
    updated_at: Mapped[datetime] = mapped_column(DateTime, nullable=False)


HISTORY_STAMP = 1
SCORING_STAMP = 2
#: Which counter a write to each table moves. Tables not named move the
#: history counter (the safe side: caches are rebuilt). ``forecasts_given``
#: moves none: it is an append-only log of answers, and no cached fact
#: derives from it, so recording a forecast leaves every cache warm.
STAMP_OF: dict[str, int | None] = {
    ForecastGiven.__tablename__: None,
    PostDraftLink.__tablename__: SCORING_STAMP,
    ForecastMatch.__tablename__: SCORING_STAMP,
    CalibrationState.__tablename__: SCORING_STAMP,
    ChangeStamp.__tablename__: None,
}
