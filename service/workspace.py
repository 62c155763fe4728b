"""A workspace: one data directory's store, embedder, index and models.

The CLI and the API both work through a ``Workspace``, so the data path is
the same everywhere: import -> store -> embed -> index -> features ->
model -> response. Heavy pieces (the embedding model, the index) load once,
on first use, and are shared by every request.
"""

from __future__ import annotations

import hashlib
import threading
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np

from models.embedding import Embedder
from models.errors import InputError, LimitExceeded, StoreError
from models.index import VectorIndex, fingerprint

from .importer import ImportSummary, ProgressFn, import_csv
from .settings import Settings
from .store import AccountInfo, Store
from .timeparse import as_utc, now_utc


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
            "mature": self.mature,
        }


def _utc_bound(dt: datetime | None, name: str) -> datetime | None:
    """A range bound as aware UTC (naive means UTC), or a clear error: naive
    and aware bounds cannot be compared, and an offset near year 1 or 9999
    leaves the calendar."""
    if dt is None:
        return None
    try:
        return as_utc(dt)
    except OverflowError:
        raise InputError(f"{name} {dt.isoformat()} is out of range in UTC", field=name,
                         value=dt.isoformat()) from None


def _held_pairs(pairs: Sequence[tuple[int, str]]) -> tuple[np.ndarray, np.ndarray]:
    """(post row ids sorted, a 64-bit digest of each one's vector key): what an
    index holds, compact enough to keep for a million posts."""
    pks = np.array([p for p, _ in pairs], dtype=np.int64)
    keys = np.array([int.from_bytes(hashlib.blake2b(k.encode(), digest_size=8).digest(), "little",
                                    signed=True) for _, k in pairs], dtype=np.int64)
    order = np.argsort(pks, kind="stable")
    return pks[order], keys[order]


class Workspace:
    """Everything one data directory holds, loaded once."""

    def __init__(self, *, settings: Settings, embedder: Embedder | None = None) -> None:
        self.settings = settings
        try:
            settings.resolved_home.mkdir(parents=True, exist_ok=True)
        except OSError as exc:  # a file in the way, no permission: the user's setting
            raise StoreError(
                f"cannot use {settings.resolved_home} as the data directory: {exc.strerror}",
                hint="set SOUNDING_HOME or --home to a directory you can write",
            ) from None
        self.store = Store(url=settings.db_url)
        self.embedder = embedder or Embedder(
            model_path=settings.embed_model_path, batch_size=settings.embed_batch_size
        )
        self._index: VectorIndex | None = None
        self._index_stamp: tuple[int, int, str] | None = None
        self._lock = threading.RLock()
        self._building = threading.Lock()  # one index build at a time
        self._held: tuple[np.ndarray, np.ndarray] | None = None  # what the index holds
        self._accounts: dict[str, AccountInfo] = {}
        self._accounts_stamp: Any = None
        self._forecaster: Any = None

    @property
    def forecaster(self) -> Any:
        """The forecast service over this workspace (loads models on demand)."""
        if self._forecaster is None:
            from .forecasting import Forecaster

            self._forecaster = Forecaster(workspace=self)
        return self._forecaster

    def close(self) -> None:
        self.store.close()

    # Index ------------------------------------------------------------------

    def index(self) -> VectorIndex:
        """The index, checked against the store and brought up to date when stale.

        The check is a cheap stamp each call; the full fingerprint comparison
        happens when the stamp moved or the index was just read from disk.
        An index this process built or updated is caught up in place (only
        the posts that changed); one read from disk that does not match is
        rebuilt.
        """
        with self._lock:
            stamp = self.store.stamp()
            if self._index is not None and stamp == self._index_stamp:
                return self._index
            pairs = self.store.index_pairs()
            fp = fingerprint(pairs)
            index = self._index
            if index is not None and index.fingerprint_ != fp and self._held is not None:
                self._catch_up(index, pairs, fp)
            if index is None:
                try:
                    index = VectorIndex.load(self.settings.index_dir)
                except StoreError:
                    index = None
            if index is None or index.fingerprint_ != fp:
                index = self._build(pairs, fp)
                index.save(self.settings.index_dir)
                self._held = _held_pairs(pairs)
            elif self._held is None:
                self._held = _held_pairs(pairs)  # so later changes are caught up in place
            self._index, self._index_stamp = index, stamp
            return index

    def _build(self, pairs: list[tuple[int, str]], fp: str) -> VectorIndex:
        ids = np.array([p for p, _ in pairs], dtype=np.int64)
        vecs = self.store.vectors([k for _, k in pairs])
        return VectorIndex(
            dim=vecs.shape[1] if len(vecs) else 384,
            approximate_above=self.settings.index_approximate_above,
        ).fit(ids, vecs, fingerprint=fp)

    def _catch_up(self, index: VectorIndex, pairs: list[tuple[int, str]], fp: str) -> None:
        """Apply to ``index`` the difference between the (post, vector key)
        pairs it holds and ``pairs`` (under the lock)."""
        held = self._held
        now = _held_pairs(pairs)
        assert held is not None
        gone = np.setdiff1d(held[0], now[0])
        if len(held[0]):
            at = np.minimum(np.searchsorted(held[0], now[0]), len(held[0]) - 1)
            changed = now[0][(held[0][at] != now[0]) | (held[1][at] != now[1])]
        else:
            changed = now[0]
        if len(gone):
            index.remove(gone, fingerprint=fp)
        if len(changed):
            key_of = dict(pairs)
            vecs = self.store.vectors([key_of[int(p)] for p in changed])
            index.upsert(changed, vecs, fingerprint=fp)
        index.fingerprint_ = fp
        self._held = now
        index.save(self.settings.index_dir)
        self._maybe_compact(index)

    def _maybe_compact(self, index: VectorIndex) -> None:
        """Rebuild beside the live index once removed posts make up a fifth of
        the HNSW graph (they cost search time, never correctness)."""
        positions = index.ntotal + index.tombstones
        if index.tombstones and index.tombstones * 5 >= positions and not self._building.locked():
            threading.Thread(target=self.reindex, daemon=True, name="sounding-reindex").start()

    def index_state(self) -> dict[str, Any]:
        """What the health endpoint reports: on disk, in step with the store?"""
        # Only the saved config is read: loading the index itself on every
        # health check would read every vector from disk.
        cfg = VectorIndex.saved_config(self.settings.index_dir)
        if cfg is None or not (self.settings.index_dir / "index.faiss").is_file():
            return {"state": "missing", "count": 0}
        ready = cfg.get("fingerprint") == self.store.fingerprint()
        return {"state": "ready" if ready else "stale", "count": int(cfg.get("count", 0))}

    def search_state(self) -> dict[str, Any] | None:
        """How the saved index searches: approximate or exact, and the recall@10
        it measured at build (from its saved config)."""
        cfg = VectorIndex.saved_config(self.settings.index_dir)
        if cfg is None:
            return None
        return {"approximate": bool(cfg.get("approximate", False)),
                "recall_at_10": float(cfg.get("recall_at_10", 1.0)),
                "ef_search": cfg.get("ef_search")}

    def reindex(self) -> VectorIndex:
        """Rebuild the index from the vectors in the store.

        The new index is built beside the live one, without the lock, so
        searches go on meanwhile; posts that changed during the build are
        applied to it before it is swapped in."""
        with self._building:
            pairs = self.store.index_pairs()
            fp = fingerprint(pairs)
            index = self._build(pairs, fp)
            with self._lock:
                self._held = _held_pairs(pairs)
                now = self.store.index_pairs()
                now_fp = fingerprint(now)
                if now_fp != fp:
                    self._catch_up(index, now, now_fp)
                else:
                    index.save(self.settings.index_dir)
                self._index, self._index_stamp = index, self.store.stamp()
            return index

    def _sync_index(self, changed_pks: Sequence[int], removed_pks: Sequence[int] = ()) -> None:
        """Bring the index up to date after this process changed posts."""
        with self._lock:
            if self._index is None:
                self.index()
                return
            pairs = self.store.index_pairs()
            fp = fingerprint(pairs)
            if self._held is not None:
                self._catch_up(self._index, pairs, fp)
            else:
                key_of = dict(pairs)
                if removed_pks:
                    self._index.remove(np.array(removed_pks, dtype=np.int64), fingerprint=fp)
                pks = [p for p in dict.fromkeys(changed_pks) if p in key_of]
                if pks:
                    vecs = self.store.vectors([key_of[p] for p in pks])
                    self._index.upsert(np.array(pks, dtype=np.int64), vecs, fingerprint=fp)
                self._index.fingerprint_ = fp
                self._index.save(self.settings.index_dir)
                self._held = _held_pairs(pairs)
                self._maybe_compact(self._index)
            self._index_stamp = self.store.stamp()

    # Import -----------------------------------------------------------------

    def import_csv(
        self,
        path: str | Path,
        *,
        account: str | None = None,
        mapping: dict[str, str] | None = None,
        timezone: str | None = None,
        progress: ProgressFn | None = None,
    ) -> ImportSummary:
        self.index()  # load or rebuild first, so the update below is incremental
        summary = import_csv(
            self.store, self.embedder, path, account=account, mapping=mapping,
            timezone=timezone, batch_rows=self.settings.import_batch_rows, progress=progress,
        )
        if summary.changed_pks or summary.updated:
            self._sync_index(summary.changed_pks)
        return summary

    def forget(self, *, account: str | None = None, post_id: str | None = None) -> int:
        """Delete posts from the store and the index together."""
        with self._lock:
            self.index()
            pks = self.store.forget(account=account, post_id=post_id)
            self._sync_index([], pks)
            return len(pks)

    def account(self, handle: str) -> AccountInfo:
        """An account's facts (zone, name), cached until the store's change
        stamp moves: a forecast needs its zone, and it rarely changes."""
        stamp = self.store.stamp()
        with self._lock:
            if self._accounts_stamp != stamp:
                self._accounts, self._accounts_stamp = {}, stamp
            hit = self._accounts.get(handle)
        if hit is None:
            hit = self.store.account(handle)  # raises NotFound for an unknown handle
            with self._lock:
                if self._accounts_stamp == stamp:
                    self._accounts[handle] = hit
        return hit

    # Precedents -------------------------------------------------------------

    def check_draft(self, text: str) -> str:
        if not text or not text.strip():
            raise InputError("the draft text is empty", field="text")
        if len(text) > self.settings.max_draft_chars:
            raise LimitExceeded(
                f"the draft has {len(text)} characters; the limit is "
                f"{self.settings.max_draft_chars} (SOUNDING_MAX_DRAFT_CHARS)",
                limit="max_draft_chars",
                maximum=self.settings.max_draft_chars,
                field="text",
            )
        return text

    def check_batch(self, n: int) -> int:
        """Refuse more drafts in one request than SOUNDING_MAX_BATCH."""
        if n > self.settings.max_batch:
            raise LimitExceeded(
                f"{n} drafts in one request; the limit is {self.settings.max_batch} "
                "(SOUNDING_MAX_BATCH)",
                limit="max_batch",
                maximum=self.settings.max_batch,
                field="drafts",
            )
        return n

    def embed_drafts(self, texts: list[str]) -> np.ndarray:
        self.check_batch(len(texts))
        for t in texts:
            self.check_draft(t)
        return self.embedder.encode(texts)

    def neighbours(
        self,
        vectors: np.ndarray,
        k: int,
        *,
        account: str | None = None,
        since: datetime | None = None,
        until: datetime | None = None,
        allowed_pks: np.ndarray | None = None,
    ) -> list[list[tuple[int, float]]]:
        """(post row id, similarity) of the ``k`` nearest posts per vector,
        optionally among ``allowed_pks`` or one account's posts in a date range."""
        allowed = allowed_pks
        if account is not None or since is not None or until is not None:
            allowed = self.store.pks_where(account=account, since=since, until=until)
            if allowed_pks is not None:
                allowed = np.intersect1d(allowed, allowed_pks)
        # Under the lock: _sync_index changes the FAISS index in place, and
        # FAISS does not allow a search while ids are removed or added.
        with self._lock:
            sims, ids = self.index().search(vectors, k, allowed_ids=allowed)
        return [
            [(int(i), float(s)) for i, s in zip(row_ids, row_sims, strict=True) if i >= 0]
            for row_ids, row_sims in zip(ids, sims, strict=True)
        ]

    def precedents(
        self,
        text: str,
        *,
        k: int = 10,
        account: str | None = None,
        since: datetime | None = None,
        until: datetime | None = None,
        now: datetime | None = None,
    ) -> list[Precedent]:
        """The ``k`` past posts most similar to ``text``, with current metrics."""
        if not 1 <= k <= self.settings.max_k:
            raise InputError(f"k must be between 1 and {self.settings.max_k}", field="k", value=k)
        since, until = _utc_bound(since, "since"), _utc_bound(until, "until")
        if since and until and since > until:
            raise InputError("the date range ends before it starts", field="since")
        vec = self.embed_drafts([text])
        hits = self.neighbours(vec, k, account=account, since=since, until=until)[0]
        return self.precedents_for(hits, now=now)

    def precedents_for(
        self, hits: list[tuple[int, float]], *, now: datetime | None = None,
        details: dict[int, dict[str, Any]] | None = None,
    ) -> list[Precedent]:
        """Precedents for (post row id, similarity) hits; ``details`` may pass
        rows already read from the store."""
        if details is None:
            details = self.store.posts_by_pk([p for p, _ in hits])
        cutoff = (now or now_utc()) - timedelta(hours=self.settings.maturity_hours)
        out = []
        for pk, sim in hits:
            d = details.get(pk)
            if d is None:  # deleted between search and lookup
                continue
            out.append(
                Precedent(
                    pk=pk, post_id=d["post_id"], account=d["account"], posted_at=d["posted_at"],
                    text=d["text"], similarity=sim, metrics=d["metrics"],
                    mature=d["posted_at"] <= cutoff, has_link=d["has_link"],
                    has_media=d["has_media"],
                )
            )
        return out

    def health(self) -> dict[str, Any]:
        counts = self.store.counts()
        return {
            "posts": counts["posts"],
            "accounts": counts["accounts"],
            "model_id": self.embedder.model_id,
            "index": self.index_state(),
            "search": self.search_state(),
            "forecaster": self._newest_model(),
        }

    def _newest_model(self) -> str | None:
        from models.artefact import versions

        found = versions(self.settings.models_dir, "impressions")
        return found[-1] if found else None
