"""The "learned neighbours" forecast candidate: neighbours found in a
projection of the text vectors learnt for what the text adds to the
account's baseline (``models.learned_retrieval``, MLKR).

- Target: the residual ``log metric - a * account baseline`` (the
  ``baseline`` feature: the median of the account's last posts settled by
  then), clipped to the 1st-99th percentiles of the fitted block. The
  anchor weight ``a`` (0, 1/2 or 1, ``ANCHORS``) is chosen in time order on
  the block: the one whose plain cosine neighbours, found among the
  block's earlier four fifths, best predict its last fifth (least absolute
  error). On a team whose accounts differ in level it is 1; where the
  trailing median is mostly noise (one account, a level that drifts) it
  is 0 and the neighbours carry the metric itself. The timing effect is
  not taken out: it is fitted later, inside the stacked forecaster, on
  rows this column must already describe.
- Projection: fitted once, on the earliest settled posts (at most
  ``max_fit_rows``, at most ``fit_share`` of them), so later rows never
  served as its targets.
- A post's value: ``a`` times its baseline plus the kernel-weighted mean residual of
  its ``k`` nearest posts in the projected space among those published and
  settled (``maturity_s``) before it. Posts before the fitted block has
  settled get NaN (the forecaster reads their baseline instead).
- A draft's value: the same among every settled post the model was
  trained with (the bank, kept in the artefact).

Neighbours are searched with a FAISS flat L2 index grown in time order:
each chunk of rows is answered from the posts every row of the chunk may
see, plus an exact pass over the few posts between the chunk's earliest
and latest horizon.
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import ClassVar, Self

import faiss
import numpy as np
from numpy.typing import ArrayLike
from threadpoolctl import threadpool_limits  # type: ignore[import-untyped]

from models.configfile import write_config
from models.constraints import Constraint, Interval, ParamsMixin, validate_params
from models.errors import InputError, NotFittedError, NotFound, StoreError
from models.learned_retrieval import MLKR
from models.threads import one_thread

CONFIG_FILE = "config.json"
#: Fewest rows the projection is fitted on (below it the column stays empty).
MIN_FIT_ROWS = 100
#: Weights of the account baseline in the target, chosen among in time order.
ANCHORS: tuple[float, ...] = (0.0, 0.5, 1.0)


class LearnedNeighbours(ParamsMixin):
    """Residual forecasts from neighbours in an MLKR projection; see the module doc."""

    _parameter_constraints: ClassVar[dict[str, Constraint]] = {
        "n_components": Interval(int, 1, 256),
        "k": Interval(int, 1, 1000),
        "max_fit_rows": Interval(int, MIN_FIT_ROWS, None),
        "fit_share": Interval(float, 0.05, 0.8),
        "max_iter": Interval(int, 1, 10_000),
        "maturity_s": Interval(float, 0.0, None),
    }

    def __init__(
        self,
        *,
        n_components: int = 32,
        k: int = 20,
        max_fit_rows: int = 1200,
        fit_share: float = 0.4,
        max_iter: int = 40,
        maturity_s: float = 48 * 3600.0,
    ) -> None:
        self.n_components = n_components
        self.k = k
        self.max_fit_rows = max_fit_rows
        self.fit_share = fit_share
        self.max_iter = max_iter
        self.maturity_s = maturity_s

    def fit(self, vectors: ArrayLike, log_target: ArrayLike, baseline: ArrayLike, times: ArrayLike) -> Self:
        """Rows sorted by time; ``log_target`` NaN where not settled (never a
        target nor a neighbour). Keeps each row's time-ordered value (``oof_``)."""
        validate_params(self.get_params(), self._parameter_constraints)
        V = np.asarray(vectors, dtype=np.float32)
        y = np.asarray(log_target, dtype=np.float64)
        b = np.asarray(baseline, dtype=np.float64)
        ts = np.asarray(times, dtype=np.float64)
        n = len(y)
        if V.ndim != 2 or V.shape[0] != n or b.shape != (n,) or ts.shape != (n,):
            raise InputError("vectors, log_target, baseline and times need one row per post", field="vectors")
        if n > 1 and np.any(np.diff(ts) < 0):
            raise InputError("rows must be sorted by time", field="times")
        ok = np.flatnonzero(np.isfinite(y) & np.isfinite(b))
        m = min(int(self.max_fit_rows), int(len(ok) * float(self.fit_share)))
        if m < MIN_FIT_ROWS:
            raise InputError(
                f"{len(ok)} settled posts with a baseline; the learned neighbours need "
                f"{int(np.ceil(MIN_FIT_ROWS / float(self.fit_share)))}",
                field="log_target",
            )
        block = ok[:m]
        self.n_fit_ = int(m)
        self.anchor_ = choose_anchor(V[block], y[block], b[block], int(self.k))
        res = y - self.anchor_ * b
        self.clip_ = (float(np.quantile(res[block], 0.01)), float(np.quantile(res[block], 0.99)))
        res = np.clip(res, *self.clip_)
        with threadpool_limits(limits=1):
            self.projection_ = MLKR(n_components=int(self.n_components), max_iter=int(self.max_iter)).fit(
                V[block], res[block]
            )
            Z = self.projection_.transform(V).astype(np.float32)
            self.fit_until_ = float(ts[block[-1]])
            # Rows whose time lets them see the whole fitted block as settled.
            start = int(np.searchsorted(ts, self.fit_until_ + float(self.maturity_s), side="left"))
            limit = np.searchsorted(ts[ok], ts - float(self.maturity_s), side="right")
            rows = np.arange(start, n)
            pred = np.full(n, np.nan)
            pred[rows] = _time_ordered(Z[ok], res[ok], Z[rows], limit[rows], int(self.k))
        self.oof_ = self._anchored(b) + pred
        self.bank_vectors_ = np.ascontiguousarray(Z[ok])
        self.bank_residuals_ = res[ok]
        self.n_features_in_ = V.shape[1]
        return self

    def _check_fitted(self) -> None:
        if not hasattr(self, "bank_vectors_"):
            raise NotFittedError("LearnedNeighbours is not fitted yet", where="LearnedNeighbours")

    def predict(self, vectors: ArrayLike, baseline: ArrayLike) -> np.ndarray:
        """Drafts: anchored baseline plus the neighbours' residual among the whole bank."""
        self._check_fitted()
        V = np.asarray(vectors, dtype=np.float64).reshape(-1, self.n_features_in_)
        b = np.asarray(baseline, dtype=np.float64).reshape(len(V))
        Z = self.projection_.transform(V).astype(np.float32)
        # The slots of an hour sweep repeat one text: each distinct vector is searched once.
        distinct, back = np.unique(Z, axis=0, return_inverse=True)
        kk = min(int(self.k), len(self.bank_residuals_))
        if len(distinct) and kk:
            with one_thread():
                D, idx = self._bank_index().search(np.ascontiguousarray(distinct), kk)
            r = _kernel_mean(D.astype(np.float64), idx, self.bank_residuals_)[back.reshape(-1)]
        else:
            r = np.full(len(Z), np.nan)
        return np.asarray(self._anchored(b) + r, dtype=np.float64)

    def _bank_index(self) -> faiss.IndexFlatL2:
        """The whole bank in an exact index, made once per fitted or loaded
        model (copying 100,000 rows into a new one cost more than the rest of
        a served forecast)."""
        index = getattr(self, "_index", None)
        if index is None:
            index = faiss.IndexFlatL2(self.bank_vectors_.shape[1])
            index.add(np.ascontiguousarray(self.bank_vectors_, dtype=np.float32))
            self._index = index
        return index

    def _anchored(self, b: np.ndarray) -> np.ndarray:
        """``anchor_ * b``; with no weight on it, a missing baseline (an
        account's first posts) does not matter."""
        return np.zeros_like(b) if self.anchor_ == 0.0 else self.anchor_ * b

    def summary(self) -> dict[str, float | int]:
        self._check_fitted()
        p = self.projection_
        return {
            "components": int(p.components_.shape[0]),
            "fitted_rows": self.n_fit_,
            "iterations": p.n_iter_,
            "kept_iteration": p.best_iter_,
            "validation_mse_start": round(p.validation_start_, 4),
            "validation_mse": round(p.validation_loss_, 4),
            "bank": len(self.bank_residuals_),
            "anchor": self.anchor_,
        }

    def save(self, directory: str | os.PathLike[str]) -> Path:
        self._check_fitted()
        root = Path(directory)
        root.mkdir(parents=True, exist_ok=True)
        self.projection_.save(root / "projection")
        np.save(root / "bank_vectors.npy", self.bank_vectors_)
        np.save(root / "bank_residuals.npy", self.bank_residuals_)
        cfg = {
            "kind": "LearnedNeighbours",
            "params": self.get_params(),
            "clip": list(self.clip_),
            "fit_until": self.fit_until_,
            "n_fit": self.n_fit_,
            "anchor": self.anchor_,
            "n_features_in": self.n_features_in_,
        }
        write_config(root, cfg, CONFIG_FILE)
        return root

    @classmethod
    def load(cls, directory: str | os.PathLike[str]) -> Self:
        root = Path(directory)
        if not (root / CONFIG_FILE).is_file():
            raise NotFound(f"no learned neighbours at {root}", where="LearnedNeighbours.load")
        try:
            cfg = json.loads((root / CONFIG_FILE).read_text())
            m = cls(**cfg["params"])
            m.projection_ = MLKR.load(root / "projection")
            m.bank_vectors_ = np.load(root / "bank_vectors.npy", allow_pickle=False)
            m.bank_residuals_ = np.load(root / "bank_residuals.npy", allow_pickle=False)
            lo, hi = cfg["clip"]
            m.clip_ = (float(lo), float(hi))
            m.fit_until_ = float(cfg["fit_until"])
            m.n_fit_ = int(cfg["n_fit"])
            m.anchor_ = float(cfg["anchor"])
            m.n_features_in_ = int(cfg["n_features_in"])
        except (OSError, ValueError, KeyError, TypeError) as exc:
            raise StoreError(f"unreadable learned neighbours: {exc}", where=str(root)) from exc
        return m


def choose_anchor(V: np.ndarray, y: np.ndarray, b: np.ndarray, k: int) -> float:
    """The anchor weight of ``ANCHORS`` whose cosine neighbours among the
    first four fifths of the rows (in time order) best predict the last
    fifth: ``a * b + mean(y - a * b)`` of the ``k`` most similar, by mean
    absolute error; ties to the larger weight."""
    cut = int(len(y) * 0.8)
    S = V[cut:].astype(np.float64) @ V[:cut].astype(np.float64).T
    kk = min(k, cut)
    top = np.argpartition(-S, kk - 1, axis=1)[:, :kk]
    errors = []
    for a in ANCHORS:
        t = y - a * b
        f = a * b[cut:] + t[:cut][top].mean(axis=1)
        errors.append((float(np.mean(np.abs(f - y[cut:]))), -a))
    return -min(errors)[1]


def _kernel_mean(D: np.ndarray, idx: np.ndarray, residuals: np.ndarray, k: int | None = None) -> np.ndarray:
    """Per row, the mean residual of its ``k`` nearest candidates (squared
    distances ``D``, bank rows ``idx``; infinite where a candidate may not be
    seen), weighted by ``exp(-(d - d_min))``; NaN where none may be seen."""
    kq = min(D.shape[1] if k is None else k, D.shape[1])
    out = np.full(len(D), np.nan)
    if kq == 0:
        return out
    top = np.argpartition(D, kq - 1, axis=1)[:, :kq]
    d = np.take_along_axis(D, top, axis=1)
    near = np.take_along_axis(idx, top, axis=1)
    r = residuals[near.clip(0)]
    fine = np.isfinite(d) & (near >= 0)
    # Distances from each row's nearest (0 where none may be seen): no inf - inf.
    d0 = np.where(fine, d, np.inf).min(axis=1, keepdims=True)
    shift = np.where(np.isfinite(d0), d0, 0.0)
    w = np.where(fine, np.exp(-(np.where(fine, d, shift) - shift)), 0.0)
    s = w.sum(axis=1)
    have = s > 0
    out[have] = (w[have] * r[have]).sum(axis=1) / s[have]
    return out


def _time_ordered(
    bank: np.ndarray,
    residuals: np.ndarray,
    queries: np.ndarray,
    limit: np.ndarray,
    k: int,
    chunk: int = 256,
    max_tail: int = 2048,
) -> np.ndarray:
    """For each query ``q`` (sorted so ``limit`` does not decrease), the
    kernel-weighted mean residual of its ``k`` nearest among the first
    ``limit[q]`` bank rows; NaN when it may see none."""
    out = np.full(len(queries), np.nan)
    if len(queries) and np.any(np.diff(limit) < 0):
        raise InputError("queries must come in time order", field="limit")
    index = faiss.IndexFlatL2(bank.shape[1])
    added = 0
    c0 = 0
    while c0 < len(queries):
        # A chunk ends after ``chunk`` rows or where its horizons spread
        # over more than ``max_tail`` posts (the exact pass stays small).
        c1 = min(c0 + chunk, int(np.searchsorted(limit, limit[c0] + max_tail, side="right")))
        c1 = max(c1, c0 + 1)
        q = np.ascontiguousarray(queries[c0:c1], dtype=np.float32)
        lim = limit[c0:c1]
        at = c0
        c0 = c1
        lo, hi = int(lim.min()), int(lim.max())
        if hi == 0:
            continue
        if lo > added:
            index.add(np.ascontiguousarray(bank[added:lo]))
            added = lo
        kk = min(k, added)
        if kk:
            D, idx = index.search(q, kk)
        else:
            D, idx = np.zeros((len(q), 0), np.float32), np.zeros((len(q), 0), np.int64)
        # The posts between the chunk's earliest and latest horizon: exact,
        # masked per row by its own horizon.
        tail = bank[added:hi]
        Dt = ((q[:, None, :] - tail[None, :, :]) ** 2).sum(axis=-1)
        Dt[np.arange(added, hi)[None, :] >= lim[:, None]] = np.inf
        Dall = np.hstack([np.where(idx >= 0, D, np.inf), Dt]).astype(np.float64)
        Iall = np.hstack([idx, np.broadcast_to(np.arange(added, hi), Dt.shape)])
        out[at:c1] = _kernel_mean(Dall, Iall, residuals, k)
    return out
