"""Nearest-neighbour search over post vectors with FAISS.

Two kinds, chosen by size when the index is built:

- exact: an inner-product scan (``IndexFlatIP`` in ``IndexIDMap2``, FAISS
  ids are the store's post row ids). Same answers as a brute-force cosine
  search, which the tests check. Cheap below a few tens of thousands of posts.
- approximate: an HNSW graph (``IndexHNSWFlat``) over positions, with an
  array mapping each position to its post row id. HNSW cannot delete, so a
  removed or replaced post leaves a tombstone (its position maps to -1) that
  every search excludes with a bitmap selector; a rebuild compacts them.
  At build time the graph measures its own recall@10 against an exact scan
  on a sample of its own vectors and raises efSearch until the recall
  reaches ``target_recall``; the figure is saved in the JSON config.

A filtered search (``allowed_ids``: one account, a date range, the settled
posts) is exact over the subset when the subset is small (a gather and one
product), and an HNSW search restricted by a bitmap selector, with
efSearch raised by how selective the filter is, when it is large.

The index is derived data: it can always be rebuilt from the vectors in the
store. ``fingerprint`` records which (post id, vector key) pairs it was
built from, so a stale index is detected at start.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
from collections.abc import Iterable
from pathlib import Path
from typing import Any, cast

import faiss
import numpy as np

from models.errors import InputError, NotFittedError, StoreError

INDEX_FILE = "index.faiss"
CONFIG_FILE = "config.json"


def fingerprint(pairs: Iterable[tuple[int, str]]) -> str:
    """Checksum of (post row id, vector key) pairs, order-independent."""
    h = hashlib.sha256()
    for pid, key in sorted(pairs):
        h.update(f"{pid}:{key}\n".encode())
    return h.hexdigest()


EF_STEPS = (32, 48, 64, 96, 128, 192, 256, 384, 512, 768, 1024)
IDS_FILE = "ids.npy"
SMALL_BATCH = 16  # queries searched with one thread


def top_k_exact(queries: np.ndarray, base: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    """Exact top-``k`` inner products of each query against ``base`` rows:
    (similarities, row positions), best first, -1 padding a short answer."""
    nq, n = len(queries), len(base)
    sims = np.full((nq, k), -np.inf, dtype=np.float32)
    pos = np.full((nq, k), -1, dtype=np.int64)
    if n == 0 or nq == 0:
        return sims, pos
    S = queries @ base.T
    kk = min(k, n)
    part = np.argpartition(-S, kk - 1, axis=1)[:, :kk] if kk < n else np.tile(np.arange(n), (nq, 1))
    ps = np.take_along_axis(S, part, axis=1)
    order = np.argsort(-ps, axis=1, kind="stable")
    sims[:, :kk] = np.take_along_axis(ps, order, axis=1)
    pos[:, :kk] = np.take_along_axis(part, order, axis=1)
    return sims, pos


def recall_at(
    approx: np.ndarray, exact_sims: np.ndarray, approx_sims: np.ndarray, *, tol: float = 1e-6
) -> float:
    """Share of the exact top-k that the approximate answer found, counting
    a returned neighbour as found when its similarity reaches the exact k-th
    (so exact ties at the boundary are not held against the index)."""
    kth = exact_sims[:, -1:]
    hit = (approx >= 0) & (approx_sims >= kth - tol)
    return float(np.minimum(hit.sum(axis=1), exact_sims.shape[1]).sum() / exact_sims.size)


def _drop_self(sims: np.ndarray, pos: np.ndarray, own: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    """The first ``k`` answers per row without the query's own position
    (the last one is cut when it is absent)."""
    order = np.argsort(pos == own[:, None], axis=1, kind="stable")  # self column last
    return (np.take_along_axis(sims, order, axis=1)[:, :k], np.take_along_axis(pos, order, axis=1)[:, :k])


class VectorIndex:
    """Cosine (inner-product) search over unit vectors keyed by id: exact,
    or an HNSW graph from ``approximate_above`` vectors on (None: always exact)."""

    # Learned state (set by fit/load): the graph's id per position, with -1 for
    # a removed post; None for the exact index, which keeps ids itself.
    ids_: np.ndarray | None

    def __init__(
        self,
        *,
        dim: int = 384,
        approximate_above: int | None = None,
        hnsw_m: int = 32,
        ef_construction: int = 40,
        target_recall: float = 0.98,
        recall_sample: int = 200,
        exact_subset_max: int = 20_000,
        random_state: int = 0,
    ) -> None:
        self.dim = dim
        self.approximate_above = approximate_above
        self.hnsw_m = hnsw_m
        self.ef_construction = ef_construction
        self.target_recall = target_recall
        self.recall_sample = recall_sample
        self.exact_subset_max = exact_subset_max
        self.random_state = random_state

    def fit(self, ids: np.ndarray, vectors: np.ndarray, *, fingerprint: str = "") -> VectorIndex:
        ids, vectors = self._check(ids, vectors)
        if len(np.unique(ids)) != len(ids):
            raise InputError("ids must be unique")
        self.fingerprint_ = fingerprint
        if self.approximate_above is not None and len(ids) >= self.approximate_above:
            hnsw = faiss.IndexHNSWFlat(self.dim, self.hnsw_m, faiss.METRIC_INNER_PRODUCT)
            hnsw.hnsw.efConstruction = self.ef_construction
            hnsw.add(vectors)
            self.index_ = hnsw
            self.ids_ = ids.copy()
            self._reindexed()
            self.ef_search_, self.recall_at_10_ = self._tune()
        else:
            index = faiss.IndexIDMap2(faiss.IndexFlatIP(self.dim))
            if len(ids):
                index.add_with_ids(vectors, ids)
            self.index_ = index
            self.ids_ = None
            self.ef_search_, self.recall_at_10_ = 0, 1.0  # exact by construction
        return self

    def _check(self, ids: np.ndarray, vectors: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        ids = np.ascontiguousarray(ids, dtype=np.int64).reshape(-1)
        vectors = np.ascontiguousarray(vectors, dtype=np.float32)
        if vectors.ndim != 2 or (len(vectors) and vectors.shape[1] != self.dim):
            raise InputError(f"vectors must have shape (n, {self.dim}), got {vectors.shape}")
        if len(ids) != len(vectors):
            raise InputError(f"{len(ids)} ids for {len(vectors)} vectors")
        return ids, vectors.reshape(-1, self.dim)

    def _fitted(self) -> faiss.Index:
        if not hasattr(self, "index_"):
            raise NotFittedError("the index is not built yet; call fit() or load()")
        return self.index_

    @property
    def approximate(self) -> bool:
        self._fitted()
        return self.ids_ is not None

    @property
    def ntotal(self) -> int:
        """How many posts the index holds (tombstones not counted)."""
        index = self._fitted()
        if self.ids_ is None:
            return int(index.ntotal)
        return int(np.count_nonzero(self.ids_ >= 0))

    # HNSW bookkeeping -------------------------------------------------------

    def _reindexed(self) -> None:
        """Refresh the id -> position lookup and the live-position bitmap."""
        assert self.ids_ is not None  # only the graph (approximate) index keeps ids_
        live = np.flatnonzero(self.ids_ >= 0)
        order = np.argsort(self.ids_[live], kind="stable")
        self._pos_sorted = live[order]
        self._ids_sorted = self.ids_[self._pos_sorted]
        self._dead = len(self.ids_) - len(live)
        self._live_bitmap = np.packbits(self.ids_ >= 0, bitorder="little") if self._dead else None

    def _positions(self, ids: np.ndarray) -> np.ndarray:
        """Positions of the given ids that the index holds."""
        if len(self._ids_sorted) == 0 or len(ids) == 0:
            return np.zeros(0, dtype=np.int64)
        at = np.searchsorted(self._ids_sorted, ids)
        at = np.minimum(at, len(self._ids_sorted) - 1)
        found = self._ids_sorted[at] == ids
        return cast(np.ndarray, self._pos_sorted[at[found]])

    def stored_vectors(self) -> np.ndarray:
        """The stored vectors by position (a view into FAISS's memory, valid
        until the next add): no second copy of a million vectors."""
        index = self._fitted()
        if index.ntotal == 0:
            return np.zeros((0, self.dim), dtype=np.float32)
        storage = faiss.downcast_index(index.index if self.ids_ is None else index.storage)
        xb: np.ndarray = faiss.rev_swig_ptr(storage.get_xb(), int(index.ntotal) * self.dim)
        return xb.reshape(-1, self.dim)

    def vectors_of(self, ids: np.ndarray) -> np.ndarray:
        """The stored vectors of the given ids, in the given order (a copy).
        Scoring posts against a query through these gives the same numbers a
        search would, without searching."""
        index = self._fitted()
        ids = np.ascontiguousarray(ids, dtype=np.int64).reshape(-1)
        if len(ids) == 0:
            return np.zeros((0, self.dim), dtype=np.float32)
        if self.ids_ is None:
            try:
                out: np.ndarray = index.reconstruct_batch(ids)
            except RuntimeError:  # FAISS refuses an id it does not hold
                out = np.zeros(0, dtype=np.float32)
            if out.shape == (len(ids), self.dim):
                return out
        elif len(self._ids_sorted):
            at = np.minimum(np.searchsorted(self._ids_sorted, ids), len(self._ids_sorted) - 1)
            if np.all(self._ids_sorted[at] == ids):
                return self.stored_vectors()[self._pos_sorted[at]]  # fancy indexing copies
        raise StoreError(
            "the index lacks some of the posts asked for; it is out of step with the store",
            hint="run `sounding reindex`",
        )

    def _tune(self) -> tuple[int, float]:
        """Smallest efSearch whose recall@10 on a sample of the index's own
        vectors reaches the target, and that recall. Each sampled vector's
        own position is left out of both answers: finding itself is easy and
        would flatter the figure."""
        n = int(self.index_.ntotal)
        xb = self.stored_vectors()
        rng = np.random.default_rng(self.random_state)
        sample = np.sort(rng.choice(n, size=min(self.recall_sample, n), replace=False))
        q = np.ascontiguousarray(xb[sample])
        k = min(10, n - 1)
        if k < 1:
            return EF_STEPS[0], 1.0
        exact_sims, exact_pos = faiss.knn(q, xb, k + 1, metric=faiss.METRIC_INNER_PRODUCT)
        exact_sims, _ = _drop_self(exact_sims, exact_pos, sample, k)
        best = (EF_STEPS[-1], 0.0)
        for ef in EF_STEPS:
            sims, pos = self.index_.search(q, k + 1, params=self._params(max(ef, k + 1), None))
            sims, pos = _drop_self(sims, pos, sample, k)
            r = recall_at(pos, exact_sims, sims)
            best = (ef, r)
            if r >= self.target_recall:
                break
        return best

    def _params(self, ef: int, sel: Any) -> faiss.SearchParametersHNSW:
        p = faiss.SearchParametersHNSW()
        p.efSearch = int(ef)
        if sel is not None:
            p.sel = sel
        return p

    # Changes ----------------------------------------------------------------

    def ids(self) -> np.ndarray:
        """The ids the index holds (to check them against the store's)."""
        ids: np.ndarray = faiss.vector_to_array(self._fitted().id_map)
        return ids.astype(np.int64)

    def upsert(self, ids: np.ndarray, vectors: np.ndarray, *, fingerprint: str) -> None:
        """Replace or add the given ids (an import's new and changed posts)."""
        ids, vectors = self._check(ids, vectors)
        index = self._fitted()
        if len(ids):
            if self.ids_ is None:
                index.remove_ids(faiss.IDSelectorBatch(ids))
                index.add_with_ids(vectors, ids)
            else:
                self.ids_[self._positions(ids)] = -1
                index.add(vectors)
                self.ids_ = np.concatenate([self.ids_, ids])
                self._reindexed()
        self.fingerprint_ = fingerprint

    def remove(self, ids: np.ndarray, *, fingerprint: str) -> int:
        ids = np.ascontiguousarray(ids, dtype=np.int64).reshape(-1)
        index = self._fitted()
        n = 0
        if len(ids) and self.ids_ is None:
            n = int(index.remove_ids(faiss.IDSelectorBatch(ids)))
        elif len(ids):
            assert self.ids_ is not None  # the branch above took the exact index
            pos = self._positions(ids)
            self.ids_[pos] = -1  # a tombstone: never returned again
            self._reindexed()
            n = len(pos)
        self.fingerprint_ = fingerprint
        return n

    @property
    def tombstones(self) -> int:
        """Removed or replaced posts still in the HNSW graph (0 when exact)."""
        self._fitted()
        return 0 if self.ids_ is None else int(self._dead)

    # Search -----------------------------------------------------------------

    def search(
        self,
        queries: np.ndarray,
        k: int,
        *,
        allowed_ids: np.ndarray | None = None,
    ) -> tuple[np.ndarray, np.ndarray]:
        """Top-``k`` similarities and ids per query row; id -1 pads a short answer.

        ``allowed_ids`` limits the search (one account, a date range) so the
        top-k are the best of that subset.
        """
        q = np.ascontiguousarray(queries, dtype=np.float32).reshape(-1, self.dim)
        if k < 1:
            raise InputError("k must be at least 1", field="k", value=k)
        if len(q) > SMALL_BATCH:
            return self._search(q, k, allowed_ids)
        # One thread for a draft or a few: OpenMP threads that wait for busy
        # cores cost far more than they share (measured on a loaded 2-core
        # machine: 170 ms with two threads, 1.6 ms with one, for one query
        # over 20,000 vectors).
        threads = faiss.omp_get_max_threads()
        faiss.omp_set_num_threads(1)
        try:
            return self._search(q, k, allowed_ids)
        finally:
            faiss.omp_set_num_threads(threads)

    def _search(self, q: np.ndarray, k: int, allowed_ids: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
        index = self._fitted()
        if allowed_ids is not None and len(allowed_ids) == 0:
            return (
                np.full((len(q), k), -np.inf, dtype=np.float32),
                np.full((len(q), k), -1, dtype=np.int64),
            )
        if self.ids_ is None:
            found: tuple[np.ndarray, np.ndarray]
            if allowed_ids is None:
                found = index.search(q, k)
                return found
            allowed = np.ascontiguousarray(allowed_ids, dtype=np.int64)
            params = faiss.SearchParameters(sel=faiss.IDSelectorBatch(allowed))
            found = index.search(q, k, params=params)
            return found
        return self._search_hnsw(q, k, allowed_ids)

    def _search_hnsw(
        self, q: np.ndarray, k: int, allowed_ids: np.ndarray | None
    ) -> tuple[np.ndarray, np.ndarray]:
        assert self.ids_ is not None  # _search sends only the graph index here
        ef = max(self.ef_search_, k)
        if allowed_ids is None:
            if self._live_bitmap is None:
                sims, pos = self.index_.search(q, k, params=self._params(ef, None))
            else:
                live = len(self._ids_sorted)
                sel = faiss.IDSelectorBitmap(self._live_bitmap)
                sims, pos = self.index_.search(
                    q, k, params=self._params(ef * min(8, math.ceil(len(self.ids_) / max(live, 1))), sel)
                )
            return sims, np.where(pos >= 0, self.ids_[np.maximum(pos, 0)], -1)
        allowed = np.unique(np.ascontiguousarray(allowed_ids, dtype=np.int64))
        pos_ok = self._positions(allowed)
        if len(pos_ok) <= self.exact_subset_max:
            # A small subset: exact over it is cheaper than a filtered graph walk.
            xb = self.stored_vectors()
            pos_ok = np.sort(pos_ok)
            sims, at = top_k_exact(q, xb[pos_ok], k)
            pos = np.where(at >= 0, pos_ok[np.maximum(at, 0)], -1)
        else:
            bits = np.zeros(len(self.ids_), dtype=np.bool_)
            bits[pos_ok] = True
            bitmap = np.packbits(bits, bitorder="little")
            sel = faiss.IDSelectorBitmap(bitmap)
            # The walk passes filtered-out nodes too: widen it by the filter's selectivity.
            widen = min(16, math.ceil(len(self._ids_sorted) / len(pos_ok)))
            sims, pos = self.index_.search(q, k, params=self._params(ef * widen, sel))
        return sims, np.where(pos >= 0, self.ids_[np.maximum(pos, 0)], -1)

    # Persistence ------------------------------------------------------------

    def config(self) -> dict[str, Any]:
        """What the saved JSON config holds (and health reports)."""
        index = self._fitted()
        approx = self.ids_ is not None
        return {
            "kind": "IndexHNSWFlat" if approx else "IndexIDMap2(IndexFlatIP)",
            "dim": self.dim,
            "count": self.ntotal,
            "positions": int(index.ntotal),
            "tombstones": self.tombstones,
            "approximate": approx,
            "approximate_above": self.approximate_above,
            "hnsw_m": self.hnsw_m if approx else None,
            "ef_construction": self.ef_construction if approx else None,
            "ef_search": int(self.ef_search_) if approx else None,
            "recall_at_10": round(float(self.recall_at_10_), 4),
            "recall_sample": min(self.recall_sample, int(index.ntotal)) if approx else 0,
            "target_recall": self.target_recall,
            "fingerprint": self.fingerprint_,
            "faiss_version": faiss.__version__,
        }

    def save(self, directory: str | Path) -> None:
        """Write the index and its config; the config is replaced last and
        atomically, so a reader never pairs a new config with an old index."""
        index = self._fitted()
        d = Path(directory)
        d.mkdir(parents=True, exist_ok=True)
        if self.ids_ is not None:
            with open(d / (IDS_FILE + ".tmp"), "wb") as f:
                np.save(f, self.ids_)
            os.replace(d / (IDS_FILE + ".tmp"), d / IDS_FILE)
        tmp = d / (INDEX_FILE + ".tmp")
        faiss.write_index(index, str(tmp))
        os.replace(tmp, d / INDEX_FILE)
        tmpc = d / (CONFIG_FILE + ".tmp")
        tmpc.write_text(json.dumps(self.config(), indent=2))
        os.replace(tmpc, d / CONFIG_FILE)

    @staticmethod
    def saved_config(directory: str | Path) -> dict[str, Any] | None:
        """The config of the index saved in ``directory`` (count, fingerprint),
        read without loading the index itself; None when there is none."""
        try:
            cfg: dict[str, Any] = json.loads((Path(directory) / CONFIG_FILE).read_text())
            return cfg
        except (FileNotFoundError, json.JSONDecodeError):
            return None

    @classmethod
    def load(cls, directory: str | Path) -> VectorIndex:
        d = Path(directory)
        try:
            cfg = json.loads((d / CONFIG_FILE).read_text())
            index = faiss.read_index(str(d / INDEX_FILE))
            ids = np.load(d / IDS_FILE) if cfg.get("approximate") else None
        except FileNotFoundError:
            raise StoreError(f"no index in {d}", hint="run `sounding reindex`") from None
        except (RuntimeError, ValueError, json.JSONDecodeError) as exc:
            raise StoreError(
                f"the index in {d} is unreadable: {exc}", hint="run `sounding reindex`"
            ) from None
        self = cls(
            dim=int(cfg["dim"]),
            approximate_above=cfg.get("approximate_above"),
            hnsw_m=int(cfg.get("hnsw_m") or 32),
            ef_construction=int(cfg.get("ef_construction") or 40),
            target_recall=float(cfg.get("target_recall", 0.98)),
        )
        self.index_ = index
        self.ids_ = ids
        self.fingerprint_ = cfg.get("fingerprint", "")
        self.ef_search_ = int(cfg.get("ef_search") or 0)
        self.recall_at_10_ = float(cfg.get("recall_at_10", 1.0))
        if ids is not None:
            self._reindexed()
            if len(ids) != int(index.ntotal):
                self.fingerprint_ = ""  # ids and graph disagree: treat as stale
        if self.ntotal != int(cfg.get("count", -1)):
            self.fingerprint_ = ""  # config and file disagree: treat as stale
        return self
