"""The health answer: counts, the embedding model, the index and the model in use.

A function of a data directory's parts (its store, settings, embedder and
saved index state), so the workspace holds the parts and not the answer.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any, Literal, Protocol

from pydantic import BaseModel, Field

from models.artefact import REPORT, intact
from models.integrity import REPAIRED
from models.metrics import DEFAULT_METRIC
from service.datadir import DataDir


class IndexState(BaseModel):
    state: Literal["ready", "stale", "missing"] = Field(description="ready, stale or missing")
    count: int


class EmbeddingState(BaseModel):
    backend: str = Field(
        description="onnx or torch once loaded; the setting (auto, onnx, "
        "torch) before the model is first used"
    )
    loaded: bool
    quantize: str = Field(description="none, or int8: approximate vectors, kept apart")
    vector_space: str = Field(description="What the stored vectors are vectors of")
    export: str | None = Field(default=None, description="The ONNX export in use")
    fallback: str | None = Field(default=None, description="Why ONNX is not in use")


class SearchState(BaseModel):
    approximate: bool = Field(description="true for an HNSW graph, false for an exact scan")
    recall_at_10: float = Field(
        description="recall@10 against exact search, measured at build "
        "on a sample of the index's own vectors (1.0 when exact)"
    )
    ef_search: int | None = Field(default=None, description="HNSW efSearch chosen at build")


class Health(BaseModel):
    posts: int
    accounts: int
    model_id: str
    embedding: EmbeddingState | None = None
    index: IndexState
    search: SearchState | None = Field(default=None, description="How the index searches")
    forecaster: str | None = Field(default=None, description="Version of the model in use")
    learned_neighbours: bool | None = Field(
        default=None,
        description="Whether the model in use blends the learned-neighbours candidate (kept only "
        "when its time-ordered backtest improved the forecast); null without a model",
    )
    damaged_models: list[str] = Field(
        default_factory=list,
        description="Model versions skipped because their files do not match their checksums",
    )
    read_only: bool = Field(default=False, description="The data directory refuses changes")
    repaired: list[str] = Field(
        default_factory=list,
        description="Saved files found damaged since the service started, and what was done (rebuilt)",
    )


class Parts(DataDir, Protocol):
    """What the health answer reads of a data directory (a ``Workspace``)."""

    @property
    def read_only(self) -> bool: ...

    def index_state(self) -> dict[str, Any]: ...

    def search_state(self) -> dict[str, Any] | None: ...


def learned_in_use(version_dir: Path) -> bool | None:
    """What a model version's training report says of the learned neighbours
    (None when the report is unreadable)."""
    try:
        report = json.loads((version_dir / REPORT).read_text())
        return bool(report.get("combination", {}).get("learned_neighbours_in_use", False))
    except (OSError, ValueError, AttributeError):
        return None


def health(ws: Parts) -> Health:
    """The health answer of a data directory (``GET /v1/health``)."""
    counts = ws.store.counts()
    metric = DEFAULT_METRIC.value
    served, damaged = intact(ws.settings.models_dir, metric)
    search = ws.search_state()
    return Health(
        posts=counts["posts"],
        accounts=counts["accounts"],
        model_id=ws.embedder.model_id,
        embedding=EmbeddingState(**ws.embedder.info()),
        index=IndexState(**ws.index_state()),
        search=None if search is None else SearchState(**search),
        forecaster=served,
        learned_neighbours=None
        if served is None
        else learned_in_use(ws.settings.models_dir / metric / served),
        damaged_models=[f"{metric}/{v}: {why}" for v, why in damaged],
        read_only=ws.read_only,
        repaired=list(REPAIRED),
    )
