"""Settings, read from ``SOUNDING_*`` environment variables.

Everything that a team may want to tune lives here, so the CLI, the API and
the tests share one source of truth. Paths are resolved against
``SOUNDING_HOME`` (default ``./.sounding``), the data directory that holds
the database, the index and trained models; nothing is written into the
source tree.
"""

from __future__ import annotations

import contextlib
import json
import os
from functools import cached_property
from pathlib import Path
from typing import TYPE_CHECKING, Any, Literal, get_origin

from pydantic import BaseModel, ConfigDict, Field, SecretStr, model_validator

if TYPE_CHECKING:
    from models.embedding import Embedder

#: The longest post text an import stores (characters, after normalising).
DEFAULT_MAX_TEXT_CHARS = 10_000


#: Every setting ``name`` is read from ``SOUNDING_NAME`` (any case).
ENV_PREFIX = "SOUNDING_"


def _environment(fields: dict[str, Any]) -> dict[str, Any]:
    """The ``SOUNDING_*`` variables that name a setting, keyed by the setting.

    A list setting is written as JSON (``["a.example", "b.example"]``); a value
    that is not JSON is passed on as it is, so validation names the variable.
    """
    found: dict[str, Any] = {}
    for key, raw in os.environ.items():
        if not key.upper().startswith(ENV_PREFIX):
            continue
        name = key[len(ENV_PREFIX) :].lower()
        field = fields.get(name)
        if field is None:
            continue
        value: Any = raw
        if get_origin(field.annotation) is list:
            with contextlib.suppress(ValueError):
                value = json.loads(raw)
        found[name] = value
    return found


class Settings(BaseModel):
    # A plain model reading the environment itself: pydantic-settings costs a
    # tenth of a second of imports (asyncio, dataclasses, cloud sources) in
    # every command, for six lines of work.
    model_config = ConfigDict(extra="ignore")

    @model_validator(mode="before")
    @classmethod
    def _read_environment(cls, data: Any) -> Any:
        """Values given in code win over the environment, which wins over defaults."""
        if not isinstance(data, dict):
            return data
        return {**_environment(cls.model_fields), **data}

    home: Path = Field(default=Path(".sounding"), description="Data directory.")
    database_url: str | None = Field(
        default=None,
        description="SQLAlchemy URL; default is a SQLite file in the data directory.",
    )
    # Shared store: service replicas on one PostgreSQL database each keep
    # their own data directory (index, uploads) and share trained models.
    forecasters_dir: Path | None = Field(
        default=None,
        description="Directory of trained forecast models; default is forecasters/ in the "
        "data directory. Point every replica of a shared store at one directory.",
    )
    refresh_seconds: float = Field(
        default=0.0,
        ge=0,
        description="How often the service checks the store's change stamp and refreshes "
        "its index in the background; 0 (the default): only when a request comes. "
        "Replicas of a shared store set a few seconds.",
    )
    token: SecretStr | None = Field(default=None, description="Bearer token required for changes over HTTP.")

    # Embedding
    embed_batch_size: int = 64
    embed_model_path: Path | None = Field(
        default=None,
        description="Directory of a sentence-transformers model; default is the bundled one.",
    )
    embed_backend: Literal["auto", "onnx", "torch"] = Field(
        default="auto",
        description="auto: ONNX Runtime when it works (same vectors, faster), else torch with a "
        "warning; onnx: ONNX Runtime or an error; torch: sentence-transformers.",
    )
    embed_quantize: Literal["none", "int8"] = Field(
        default="none",
        description="int8: a dynamically quantised ONNX graph; faster, but its vectors and "
        "neighbours differ (top-10 overlap ~0.90), so only on request.",
    )
    embed_threads: int = Field(
        default=0, ge=0, description="ONNX Runtime intra-op threads (0: one per core)."
    )
    embed_preload: bool = Field(
        default=True,
        description="check, hours, compare and precedents read the embedding model and the saved "
        "index in a thread while they start, instead of at their first embedding and search.",
    )

    # Import
    import_batch_rows: int = Field(default=500, ge=1)
    cluster_batch_rows: int = Field(
        default=20_000,
        ge=1,
        description="Rows per batch when embedding on a Ray cluster (one Ray Data job each).",
    )

    # Forecasting
    maturity_hours: float = Field(default=48.0, ge=0)
    neighbours: int = Field(default=20, ge=1, le=200)
    similar_threshold: float = Field(default=0.5, ge=-1, le=1)
    baseline_posts: int = Field(default=20, ge=1)
    min_history_posts: int = Field(default=20, ge=1)

    # Scale. An exact scan costs about 2 ms per draft at 10,000 posts and
    # 18-20 ms at 100,000 on two cores, while an HNSW graph answers in well under a
    # millisecond at either size; below 50,000 posts the graph's build time (tens of
    # seconds) buys little, so the index stays exact there.
    index_approximate_above: int = Field(
        default=50_000,
        ge=1,
        description="From this many posts on, the search index is an HNSW graph, else exact.",
    )
    # Training features from exact blocked products up to this many posts, from an
    # approximate time-ordered HNSW search past it (the products grow with the square).
    train_approximate_above: int = Field(
        default=300_000,
        ge=1,
        description="From this many posts on, training neighbours come from an HNSW search.",
    )
    train_max_posts: int | None = Field(
        default=None,
        ge=1,
        description="Train on at most this many of the most recent settled posts "
        "(neighbours still come from the whole history); unset means all.",
    )

    # Near-repeat warnings (service.review.near_repeats). Chosen on the demo data
    # (3,000 posts, all-MiniLM-L6-v2 cosine): the 55 planted repeats sit at 0.947-0.996
    # against their originals (5th percentile 0.961), while an ordinary post's nearest
    # earlier post is at 0.91 (same account, 45 days) / 0.87 (teammates, 7 days) at the 99th
    # percentile and 0.948 / 0.942 at the 99.9th. 0.93 keeps every planted pair with a
    # margin of 0.017 and flags 14 of 2,945 ordinary posts (0.5%), mostly true look-alikes
    # (the same event or finding in nearly the same words). 45 days covers the generator's
    # same-account repeats (1-20 days) and the plan's planted repeat (39 days before its
    # planned time).
    repeat_similarity: float = Field(default=0.93, ge=-1, le=1)
    repeat_window_days: float = Field(default=45.0, gt=0)
    team_repeat_window_days: float = Field(default=7.0, gt=0)
    # Near-repeats by words (service.history.word_repeats): the share of an earlier
    # post's BM25 self-score that a draft's words must reach on it. Chosen on the demo
    # data in the same windows: the 55 planted repeats reach 0.918-1.0 on their originals
    # (5th percentile 0.982), while an ordinary post's best earlier post reaches 0.41 at
    # the median, 0.74 at the 99th percentile and 0.86 at the 99.9th (template-made texts
    # share many words). 0.8 keeps every planted pair with a margin of 0.118 and flags 11
    # of 2,945 ordinary posts (0.4%), as few as the cosine rule.
    repeat_words_share: float = Field(default=0.8, gt=0, le=1)

    # The "posts sharing the draft's key terms" columns (service.forecast.shared_columns):
    # auto tries them in training's backtest and keeps them only where it improves; off
    # never tries them; hashtags or rare_terms keeps that kind whatever the backtest says.
    shared_terms: Literal["auto", "off", "hashtags", "rare_terms"] = "auto"

    # Limits
    max_draft_chars: int = Field(default=5000, ge=1)
    # A stored text is echoed into every answer that shows it as a precedent,
    # so an imported text is capped too (far above any platform's post length).
    max_text_chars: int = Field(default=DEFAULT_MAX_TEXT_CHARS, ge=1)
    max_batch: int = Field(default=500, ge=1)
    max_upload_bytes: int = Field(default=50 * 1024 * 1024, ge=1)
    max_k: int = Field(default=100, ge=1)
    max_json_bytes: int = Field(
        default=16 * 1024 * 1024,
        ge=1,
        description="Largest JSON request body; refused (413) before it is parsed.",
    )

    # Writers and the HTTP service's defences (service.storage.locking, service.api.guard)
    write_wait_seconds: float = Field(
        default=300.0,
        ge=0,
        description="How long an import, forget or training waits for another one to finish.",
    )
    allowed_hosts: list[str] = Field(
        default_factory=list,
        description="Host names the service answers besides loopback and its bound address "
        "(a JSON list); any other Host header is refused, against DNS rebinding.",
    )
    keep_alive_seconds: int = Field(default=5, ge=1, description="Idle keep-alive timeout.")
    header_timeout_seconds: float = Field(
        default=10.0, gt=0, description="Time a client has to send a request's headers."
    )
    body_timeout_seconds: float = Field(
        default=120.0, gt=0, description="Time a client has to send a request's body."
    )

    # Track record (service.track.record) ---------------------------
    now: str | None = Field(
        default=None,
        description="RFC 3339 time fixing 'now' for every command and the service "
        "(read by service.clock.now_utc); default: the system clock.",
    )
    # Matching a published post to the forecast of its draft: same account, a planned time
    # within this many hours of the posting time, and draft-to-post cosine similarity
    # (all-MiniLM-L6-v2) at or above match_similarity. 0.90 is chosen on the demo data (see
    # DEVELOPERS.md, "Track record"): light edits of a text (the 55 planted near-repeats: a word
    # or emoji swapped, a short prefix) sit at 0.947-1.000 from their original, while of the
    # 12,603 pairs of different posts of one account within 48 h, 99.9% sit below 0.83 and only
    # 2 (0.02%, the same lab finding in other words) reach 0.90 (maximum 0.927).
    match_similarity: float = Field(default=0.90, ge=-1, le=1)
    match_window_hours: float = Field(default=48.0, gt=0)
    # Adaptive conformal inference (Gibbs & Candes 2021): step size of alpha_t per outcome,
    # and how many scored forecasts make the record long enough to stop using pseudo-outcomes.
    adaptive_gamma: float = Field(default=0.01, gt=0, le=0.5)
    adaptive_min_scored: int = Field(default=50, ge=1)
    # Staleness warnings: the model is older than this many newly settled posts or days.
    stale_after_posts: int = Field(default=300, ge=1)
    stale_after_days: float = Field(default=30.0, gt=0)

    @cached_property
    def resolved_home(self) -> Path:
        return self.home.expanduser().resolve()

    @property
    def db_url(self) -> str:
        if self.database_url:
            return self.database_url
        return f"sqlite:///{self.resolved_home / 'sounding.db'}"

    @property
    def index_dir(self) -> Path:
        return self.resolved_home / "index"

    @property
    def models_dir(self) -> Path:
        if self.forecasters_dir is not None:
            return self.forecasters_dir.expanduser().resolve()
        return self.resolved_home / "forecasters"

    @property
    def embedding_dir(self) -> Path:
        """Exports of the embedding model (ONNX graphs), one directory each."""
        return self.resolved_home / "embedding"

    @property
    def uploads_dir(self) -> Path:
        return self.resolved_home / "uploads"

    def embedder(self) -> Embedder:
        """The embedder these settings describe; its model loads on first use."""
        from models.embedding import Embedder  # numpy and the tokenizer: not for every setting read

        return Embedder(
            model_path=self.embed_model_path,
            batch_size=self.embed_batch_size,
            backend=self.embed_backend,
            quantize=self.embed_quantize,
            export_dir=self.embedding_dir,
            threads=self.embed_threads,
        )


def get_settings() -> Settings:
    """The settings from the environment; a wrong ``SOUNDING_*`` value is an
    :class:`InputError` naming the variable, its value and what it must be."""
    from pydantic import ValidationError

    from models.errors import InputError

    try:
        return Settings()
    except ValidationError as exc:
        first = exc.errors()[0]
        name = "SOUNDING_" + "_".join(str(p) for p in first["loc"][:1]).upper()
        value = first.get("input")
        raise InputError(
            f"{name}={value!r} is not a valid setting: {first['msg']}",
            field=name,
            value=None if value is None else str(value),
        ) from None
