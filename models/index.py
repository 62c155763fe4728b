"""Nearest-neighbour search over post vectors with FAISS.

An exact inner-product index (``IndexFlatIP``) wrapped in ``IndexIDMap2``
so FAISS ids are the store's post row ids. Exact search is fast enough for
a team's history (a 100,000 x 384 scan is a few milliseconds) and gives the
same answers as a brute-force cosine search, which the tests check.

The index is derived data: it can always be rebuilt from the vectors in the
store. ``fingerprint`` records which (post id, vector key) pairs it was
built from, so a stale index is detected at start.
"""

from __future__ import annotations

import hashlib
import json
import os
from collections.abc import Iterable
from pathlib import Path

import faiss
import numpy as np

from .errors import InputError, NotFittedError, StoreError

INDEX_FILE = "index.faiss"
CONFIG_FILE = "config.json"


def fingerprint(pairs: Iterable[tuple[int, str]]) -> str:
    """Checksum of (post row id, vector key) pairs, order-independent."""
    h = hashlib.sha256()
    for pid, key in sorted(pairs):
        h.update(f"{pid}:{key}\n".encode())
    return h.hexdigest()


class VectorIndex:
    """Exact cosine (inner-product) search over unit vectors keyed by id."""

    def __init__(self, *, dim: int = 384) -> None:
        self.dim = dim

    def fit(self, ids: np.ndarray, vectors: np.ndarray, *, fingerprint: str = "") -> VectorIndex:
        ids, vectors = self._check(ids, vectors)
        index = faiss.IndexIDMap2(faiss.IndexFlatIP(self.dim))
        if len(ids):
            index.add_with_ids(vectors, ids)
        self.index_ = index
        self.fingerprint_ = fingerprint
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
    def ntotal(self) -> int:
        return int(self._fitted().ntotal)

    def ids(self) -> np.ndarray:
        """The ids the index holds (to check them against the store's)."""
        return faiss.vector_to_array(self._fitted().id_map).astype(np.int64)

    def upsert(self, ids: np.ndarray, vectors: np.ndarray, *, fingerprint: str) -> None:
        """Replace or add the given ids (an import's new and changed posts)."""
        ids, vectors = self._check(ids, vectors)
        index = self._fitted()
        if len(ids):
            index.remove_ids(faiss.IDSelectorBatch(ids))
            index.add_with_ids(vectors, ids)
        self.fingerprint_ = fingerprint

    def remove(self, ids: np.ndarray, *, fingerprint: str) -> int:
        ids = np.ascontiguousarray(ids, dtype=np.int64).reshape(-1)
        n = int(self._fitted().remove_ids(faiss.IDSelectorBatch(ids))) if len(ids) else 0
        self.fingerprint_ = fingerprint
        return n

    def search(
        self,
        queries: np.ndarray,
        k: int,
        *,
        allowed_ids: np.ndarray | None = None,
    ) -> tuple[np.ndarray, np.ndarray]:
        """Top-``k`` similarities and ids per query row; id -1 pads a short answer.

        ``allowed_ids`` limits the search (one account, a date range) inside
        FAISS with an id selector, so the top-k are the best of that subset.
        """
        index = self._fitted()
        q = np.ascontiguousarray(queries, dtype=np.float32).reshape(-1, self.dim)
        if k < 1:
            raise InputError("k must be at least 1", field="k", value=k)
        if allowed_ids is None:
            return index.search(q, k)
        allowed = np.ascontiguousarray(allowed_ids, dtype=np.int64)
        if len(allowed) == 0:
            return (
                np.full((len(q), k), -np.inf, dtype=np.float32),
                np.full((len(q), k), -1, dtype=np.int64),
            )
        params = faiss.SearchParameters(sel=faiss.IDSelectorBatch(allowed))
        return index.search(q, k, params=params)

    def save(self, directory: str | Path) -> None:
        """Write the index and its config; the config is replaced last and
        atomically, so a reader never pairs a new config with an old index."""
        index = self._fitted()
        d = Path(directory)
        d.mkdir(parents=True, exist_ok=True)
        tmp = d / (INDEX_FILE + ".tmp")
        faiss.write_index(index, str(tmp))
        os.replace(tmp, d / INDEX_FILE)
        cfg = {
            "kind": "IndexIDMap2(IndexFlatIP)",
            "dim": self.dim,
            "count": int(index.ntotal),
            "fingerprint": self.fingerprint_,
            "faiss_version": faiss.__version__,
        }
        tmpc = d / (CONFIG_FILE + ".tmp")
        tmpc.write_text(json.dumps(cfg, indent=2))
        os.replace(tmpc, d / CONFIG_FILE)

    @staticmethod
    def saved_config(directory: str | Path) -> dict | None:
        """The config of the index saved in ``directory`` (count, fingerprint),
        read without loading the index itself; None when there is none."""
        try:
            return json.loads((Path(directory) / CONFIG_FILE).read_text())
        except (FileNotFoundError, json.JSONDecodeError):
            return None

    @classmethod
    def load(cls, directory: str | Path) -> VectorIndex:
        d = Path(directory)
        try:
            cfg = json.loads((d / CONFIG_FILE).read_text())
            index = faiss.read_index(str(d / INDEX_FILE))
        except FileNotFoundError:
            raise StoreError(f"no index in {d}", hint="run `sounding reindex`") from None
        except (RuntimeError, ValueError, json.JSONDecodeError) as exc:
            raise StoreError(f"the index in {d} is unreadable: {exc}", hint="run `sounding reindex`") from None
        self = cls(dim=int(cfg["dim"]))
        self.index_ = index
        self.fingerprint_ = cfg.get("fingerprint", "")
        if int(index.ntotal) != int(cfg.get("count", -1)):
            self.fingerprint_ = ""  # config and file disagree: treat as stale
        return self
