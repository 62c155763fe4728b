"""A workspace: one data directory's store, embedder, index and models.

The CLI and the API both work through a ``Workspace``, so the data path is
the same everywhere: import -> store -> embed -> index -> features ->
model -> response. Heavy pieces (the embedding model, the index) load once,
on first use, and are shared by every request.
"""

from __future__ import annotations

import hashlib
import logging
import os
import threading
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager, suppress
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np

from models.artefact import clean_leftovers
from models.constraints import Interval
from models.embedding import Embedder
from models.errors import InputError, ReadOnly, StoreError
from models.index import DamagedIndex, VectorIndex, fingerprint
from models.integrity import note_repair
from service.clock import as_utc, now_utc
from service.forecast.forecaster import Forecaster
from service.history import index_step
from service.history.match_modes import Match, matched
from service.history.precedents import Precedent, precedents_for
from service.history.retrieval import Retriever
from service.ingest.answers import ImportPreview, ImportSummary
from service.ingest.importer import EmbedFn, ProgressFn, import_csv
from service.ingest.options import ImportOptions
from service.ingest.preview import preview_csv
from service.settings import Settings
from service.storage import forgetting, uploads
from service.storage.accounts import AccountInfo
from service.storage.followers import check_followers
from service.storage.locking import LOCK_FILE, WriteLock
from service.storage.presence import Presence
from service.storage.store import Store
from service.track.adaptation import after_import

__all__ = ["Precedent", "Workspace"]


def _utc_bound(dt: datetime | None, name: str) -> datetime | None:
    """A range bound as aware UTC (naive means UTC), or a clear error: naive
    and aware bounds cannot be compared, and an offset near year 1 or 9999
    leaves the calendar."""
    if dt is None:
        return None
    try:
        return as_utc(dt)
    except OverflowError:
        raise InputError(
            f"{name} {dt.isoformat()} is out of range in UTC", field=name, value=dt.isoformat()
        ) from None


log = logging.getLogger("sounding.workspace")


def _held_pairs(pairs: Sequence[tuple[int, str]]) -> tuple[np.ndarray, np.ndarray]:
    """(post row ids sorted, a 64-bit digest of each one's vector key): what an
    index holds, compact enough to keep for a million posts."""
    pks = np.array([p for p, _ in pairs], dtype=np.int64)
    keys = np.array(
        [
            int.from_bytes(hashlib.blake2b(k.encode(), digest_size=8).digest(), "little", signed=True)
            for _, k in pairs
        ],
        dtype=np.int64,
    )
    order = np.argsort(pks, kind="stable")
    return pks[order], keys[order]


class Workspace:
    """Everything one data directory holds, loaded once."""

    def __init__(
        self,
        *,
        settings: Settings,
        embedder: Embedder | None = None,
        saved_index: Callable[[], VectorIndex] | None = None,
    ) -> None:
        """``saved_index``, when given, reads the saved index in place of
        ``VectorIndex.load`` the first time it is needed (the command line
        reads it in a thread while it starts: service/cli/warmup.py)."""
        self.settings = settings
        self._saved_index = saved_index
        try:
            settings.resolved_home.mkdir(parents=True, exist_ok=True)
        except OSError as exc:  # a file in the way, no permission: the user's setting
            raise StoreError(
                f"cannot use {settings.resolved_home} as the data directory: {exc.strerror}",
                hint="set SOUNDING_HOME or --home to a directory you can write",
            ) from None
        # A read-only directory (a read-only mount, a restored snapshot) still
        # serves reads; every change is refused with one message (writing()).
        self.read_only = not os.access(settings.resolved_home, os.W_OK)
        # Held while open, so a restore never swaps the store under this process.
        self._presence = None if self.read_only else Presence(settings.resolved_home)
        self.store = Store(url=settings.db_url, read_only=self.read_only and settings.database_url is None)
        self._writer = WriteLock(
            path=settings.resolved_home / LOCK_FILE, wait_seconds=settings.write_wait_seconds
        )
        if not self.read_only:
            for p in clean_leftovers(settings.models_dir):
                log.warning("removed %s, left by a training that did not finish", p.name)
            for p in uploads.sweep(settings.uploads_dir):
                log.warning("removed %s, an upload left by an import that did not finish", p.name)
        self.embedder = embedder or settings.embedder()
        self._index: VectorIndex | None = None
        self._index_stamp: int | None = None
        self._index_own = 0  # store.own_writes when the index was last in step
        self._lock = threading.RLock()
        self.retrieval = Retriever(store=self.store, index=self.index, lock=self._lock)
        #: The forecast service over this data directory (loads models on demand).
        self.forecaster = Forecaster(
            store=self.store, settings=settings, retrieval=self.retrieval, encode=self.embedder.encode
        )
        self._building = threading.Lock()  # one index build at a time
        self._held: tuple[np.ndarray, np.ndarray] | None = None  # what the index holds
        self._accounts: dict[str, AccountInfo] = {}
        self._accounts_stamp: Any = None

    def close(self) -> None:
        self.store.close()
        if self._presence is not None:
            self._presence.release()

    @contextmanager
    def writing(self, what: str) -> Iterator[None]:
        """Hold this data directory's write lock for ``what`` (service.storage.locking):
        imports, forgets, reindexing and training run one at a time."""
        self.check_writable(what)
        with self._writer.hold(what):
            yield

    def check_writable(self, what: str) -> None:
        """Refuse ``what`` with one clear message when the directory is read-only."""
        if self.read_only:
            raise ReadOnly(
                f"cannot run {what}: the data directory is read-only; reads still work",
                hint="give the service a writable SOUNDING_HOME to make changes",
            )

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
            if self._index is None and (kept := self._kept_index(stamp)) is not None:
                self._index, self._index_stamp = kept, stamp
                self._index_own = self.store.own_writes
                return kept
            pairs = self.store.index_pairs()
            fp = fingerprint(pairs)
            index = self._index
            if index is not None and index.fingerprint_ != fp and self._held is not None:
                self._catch_up(index, pairs, fp)
            if index is None:
                try:
                    index = self._load_saved()
                except DamagedIndex as exc:
                    log.warning("%s; rebuilding it", exc.message)
                    note_repair(f"index: {exc.message}; rebuilt from the store")
                    index = None
                except StoreError:
                    index = None
            if index is None or index.fingerprint_ != fp:
                index = self._build(pairs, fp)
                self._save_index(index)
                self._held = _held_pairs(pairs)
            elif self._held is None:
                self._held = _held_pairs(pairs)  # so later changes are caught up in place
            self._index, self._index_stamp = index, stamp
            self._index_own = self.store.own_writes
            self._keep_step(stamp, fp)
            return index

    def _keep_step(self, stamp: int, fp: str) -> None:
        """Note beside the saved index that it is in step with the store at ``stamp``."""
        if self._held is not None and self._index is not None and self._index.fingerprint_ == fp:
            index_step.save(
                self.settings.index_dir,
                stamp=stamp,
                store=self.store.safe_url,
                fingerprint=fp,
                held=self._held,
            )

    def _load_saved(self) -> VectorIndex:
        take, self._saved_index = self._saved_index, None
        return take() if take is not None else VectorIndex.load(self.settings.index_dir)

    def _kept_index(self, stamp: int) -> VectorIndex | None:
        """The saved index, when its step file says it is in step with the
        store at ``stamp`` (``service.history.index_step``); None otherwise,
        or when it does not load (the full check then rebuilds it)."""
        cfg = VectorIndex.saved_config(self.settings.index_dir)
        fp = cfg.get("fingerprint") if cfg else None
        if not isinstance(fp, str):
            return None
        held = index_step.load(
            self.settings.index_dir, stamp=stamp, store=self.store.safe_url, fingerprint=fp
        )
        if held is None:
            return None
        try:
            index = self._load_saved()
        except StoreError:  # DamagedIndex included: the full check reports and rebuilds it
            return None
        if index.fingerprint_ != fp:
            return None  # replaced between the two reads
        self._held = held
        return index

    def _build(self, pairs: list[tuple[int, str]], fp: str) -> VectorIndex:
        ids = np.array([p for p, _ in pairs], dtype=np.int64)
        vecs = self.store.vectors([k for _, k in pairs])
        return VectorIndex(
            dim=vecs.shape[1] if len(vecs) else self.embedder.dim,
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
        self._save_index(index)
        self._maybe_compact(index)

    def _maybe_compact(self, index: VectorIndex) -> None:
        """Rebuild beside the live index once removed posts make up a fifth of
        the HNSW graph (they cost search time, never correctness)."""
        positions = index.ntotal + index.tombstones
        if index.tombstones and index.tombstones * 5 >= positions and not self._building.locked():
            threading.Thread(target=self._reindex, daemon=True, name="sounding-reindex").start()

    def _save_index(self, index: VectorIndex) -> None:
        """Save the index, or keep it in memory only: a full disk or a
        read-only directory must not stop reads (it is rebuilt next start)."""
        try:
            index.save(self.settings.index_dir)
        except (OSError, RuntimeError) as exc:  # FAISS reports write errors as RuntimeError
            with suppress(OSError):
                (self.settings.index_dir / "index.faiss.tmp").unlink(missing_ok=True)
            log.warning(
                "the index is kept in memory only; saving it failed: %s",
                getattr(exc, "strerror", None) or str(exc).splitlines()[0],
            )

    def index_state(self) -> dict[str, Any]:
        """What the health endpoint reports: on disk, in step with the store?"""
        # Only the saved config is read: loading the index itself on every
        # health check would read every vector from disk.
        cfg = VectorIndex.saved_config(self.settings.index_dir)
        if cfg is None or not (self.settings.index_dir / "index.faiss").is_file():
            return {"state": "missing", "count": 0}
        # The index in memory, when in step with the store's change counter, is
        # what the store holds, so its fingerprint stands in for hashing every
        # (post, vector) pair again: 0.2 s at 100,000 posts, on every check.
        index, at = self._index, self._index_stamp
        now = (
            index.fingerprint_ if index is not None and at == self.store.stamp() else self.store.fingerprint()
        )
        ready = cfg.get("fingerprint") == now
        return {"state": "ready" if ready else "stale", "count": int(cfg.get("count", 0))}

    def search_state(self) -> dict[str, Any] | None:
        """How the saved index searches: approximate or exact, and the recall@10
        it measured at build (from its saved config)."""
        cfg = VectorIndex.saved_config(self.settings.index_dir)
        if cfg is None:
            return None
        return {
            "approximate": bool(cfg.get("approximate", False)),
            "recall_at_10": float(cfg.get("recall_at_10", 1.0)),
            "ef_search": cfg.get("ef_search"),
        }

    def reindex(self) -> VectorIndex:
        """Rebuild the index from the vectors in the store, as the data
        directory's one writer (service.storage.locking)."""
        with self.writing("a reindex"):
            return self._reindex()

    def _reindex(self) -> VectorIndex:
        """Build a new index beside the live one, without the lock, so searches
        go on meanwhile; posts that changed during the build are applied to it
        before it is swapped in."""
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
                    self._save_index(index)
                self._index, self._index_stamp = index, self.store.stamp()
                self._index_own = self.store.own_writes
            return index

    def _sync_index(self, changed_pks: Sequence[int], removed_pks: Sequence[int] = ()) -> None:
        """Bring the index up to date after this process changed posts."""
        with self._lock:
            if self._index is None:
                self.index()
                return
            # The counter before the pairs: a write in between leaves it behind
            # what the index holds, so the next look compares them again.
            stamp = self.store.stamp()
            pairs = self.store.index_pairs()
            fp = fingerprint(pairs)
            own = self.store.own_writes
            if self._held is not None:
                # Diffs the index against the store's whole (post, vector) set,
                # so changes by other processes (replicas, the CLI, a writer
                # that bypassed the lock) are applied too: the index never
                # claims the store's fingerprint without holding exactly its posts.
                self._catch_up(self._index, pairs, fp)
            else:
                self._index = self._build(pairs, fp)
                self._save_index(self._index)
                self._held = _held_pairs(pairs)
            self._index_stamp, self._index_own = stamp, own
            self._keep_step(stamp, fp)

    # Import -----------------------------------------------------------------

    def import_csv(
        self,
        path: str | Path,
        options: ImportOptions | None = None,
        *,
        progress: ProgressFn | None = None,
        embed: EmbedFn | None = None,
        batch_rows: int | None = None,
    ) -> ImportSummary:
        """Import a file read as ``options`` say (service.ingest.importer), keeping
        the index and the track record in step."""
        options = options or ImportOptions()
        with self.writing("an import"):
            self.index()  # load or rebuild first, so the update below is incremental
            before = self.store.counts()["posts"]
            try:
                summary = import_csv(
                    self.store,
                    self.embedder,
                    path,
                    options,
                    batch_rows=batch_rows or self.settings.import_batch_rows,
                    progress=progress,
                    embed=embed,
                    max_text_chars=self.settings.max_text_chars,
                )
            except StoreError as exc:
                # A full disk or a lost store mid-import: whole batches before
                # it are stored, so say how far it got; the index follows them.
                self._index_stamp = None
                self.index()
                added = self.store.counts()["posts"] - before
                raise StoreError(
                    f"the import stopped: {exc.message}. {added} new posts were stored "
                    "before it stopped (whole batches only); the rest of the file was not",
                    where=exc.where,
                    hint="fix the cause (free disk space) and import the file again: "
                    "stored rows are not added twice",
                ) from None
            if summary.changed_pks or summary.updated:
                self._sync_index(summary.changed_pks)
            # The track record: draft ids, matching, scoring, adaptation.
            after_import(self, path, options)
            self.forecaster.warm()  # the import pays for the views, not the next forecast
            return summary

    def preview_import(self, path: str | Path, options: ImportOptions | None = None) -> ImportPreview:
        """A dry run of :meth:`import_csv`: the same checks, nothing written."""
        return preview_csv(
            self.store, self.embedder, path, options, max_text_chars=self.settings.max_text_chars
        )

    def forget(self, *, account: str | None = None, post_id: str | None = None) -> int:
        """Delete posts from the store, the track record and the index
        together, and clear the copies left outside them (service.storage.forgetting)."""
        with self.writing("a forget"):
            with self._lock:
                self.index()
                pks = self.store.forget(
                    account=account, post_id=post_id, also=forgetting.hook(self.settings.resolved_home)
                )
                self._sync_index([], pks)
                rebuild = self._index is not None and bool(self._index.tombstones)
            if rebuild:
                # An HNSW graph keeps removed vectors until rebuilt; outside the
                # index lock, as a build waits for any build already under way.
                self._reindex()
            self.forecaster.warm()
            forgetting.clear_leftovers(self.store, self.settings.uploads_dir)
            return len(pks)

    def change_account(
        self,
        handle: str,
        *,
        display_name: str | None = None,
        timezone: str | None = None,
        reference: bool | None = None,
        followers: int | None = None,
        since: datetime | None = None,
    ) -> AccountInfo:
        """Create or update an account, as the data directory's one writer:
        name, zone, reference or team, and a follower count from ``since``
        on (default: now). Every value is checked before anything is written."""
        if followers is not None:
            check_followers(followers)
        at = _utc_bound(since, "since") or now_utc()
        with self.writing("an account change"):
            info = self.store.set_account(
                handle, display_name=display_name, timezone=timezone, reference=reference
            )
            if followers is not None:
                self.store.set_followers(info.handle, followers, since=at)
        self.forecaster.warm()
        return info

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

    def precedents(
        self,
        text: str,
        *,
        k: int = 10,
        account: str | None = None,
        since: datetime | None = None,
        until: datetime | None = None,
        now: datetime | None = None,
        match: Match = Match.MEANING,
    ) -> list[Precedent]:
        """The ``k`` past posts most similar to ``text``, with current metrics,
        matched by meaning, by words or both (``service.history.match_modes``)."""
        Interval(int, 1, self.settings.max_k).check(k, "k")
        since, until = _utc_bound(since, "since"), _utc_bound(until, "until")
        if since and until and since > until:
            raise InputError("the date range ends before it starts", field="since")
        vec = self.forecaster.embed([text])
        if match is Match.MEANING:
            hits = self.retrieval.nearest(vec, k, account=account, since=since, until=until)[0]
        else:
            filtered = account is not None or since is not None or until is not None
            allowed = self.store.pks_where(account=account, since=since, until=until) if filtered else None
            hits = matched(self.retrieval, vec, text, k, match=match, allowed_pks=allowed)
        return precedents_for(self.store, hits, maturity_hours=self.settings.maturity_hours, now=now)
