"""A ridge regression of the log metric on the text's embedding vector.

The neighbour features only look at a post's 20 nearest precedents; a
linear model on the vectors themselves pools every past post, which helps
when the text signal is weak and spread thin.

Two uses, both in time order:

- ``time_ordered_predictions``: one prediction for every post of a
  history, each from a ridge fitted only on posts published *and settled*
  (older than the maturity window) before the post's chunk starts, so no
  post sees its own target or anything later. It becomes the
  ``text_ridge`` feature of training rows.
- ``RidgeText``: the ridge fitted on every settled post, for drafts.

The penalty is chosen in time order too (prequentially): each refit takes
the penalty whose earlier out-of-sample predictions, on posts already
settled by then, had the smallest squared error.

The solver works on sufficient statistics (``X'X``, ``X'y``, sums) with
one eigendecomposition per refit, so a whole grid of penalties costs one
decomposition; it minimises ``||y - Xw - b||^2 + alpha ||w||^2`` with an
unpenalised intercept, as scikit-learn's ``Ridge(fit_intercept=True)``.
"""

from __future__ import annotations

import json
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Self, cast

import numpy as np
from numpy.typing import ArrayLike
from threadpoolctl import threadpool_limits  # type: ignore[import-untyped]

from models.errors import InputError, NotFittedError, NotFound, StoreError

#: Penalties tried; embedding vectors are unit rows of 384 values.
ALPHAS: tuple[float, ...] = tuple(float(a) for a in np.logspace(-1, 4, 11))
DEFAULT_ALPHA = 30.0  # before any out-of-sample error is known (from memory, a middling choice)
MIN_FIT_ROWS = 30
CONFIG_FILE = "config.json"


@dataclass(slots=True)
class _Stats:
    """Running sufficient statistics of the rows added so far."""

    gram: np.ndarray
    xy: np.ndarray
    xsum: np.ndarray
    ysum: float = 0.0
    n: int = 0

    @classmethod
    def empty(cls, d: int) -> _Stats:
        return cls(np.zeros((d, d)), np.zeros(d), np.zeros(d))

    def add(self, X: np.ndarray, y: np.ndarray) -> None:
        if len(y) == 0:
            return
        X = X.astype(np.float64, copy=False)
        self.gram += X.T @ X
        self.xy += X.T @ y
        self.xsum += X.sum(axis=0)
        self.ysum += float(y.sum())
        self.n += len(y)

    def solve(self, alphas: Sequence[float] | np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``(mean_x, mean_y, coefs)`` with ``coefs`` of shape (d, len(alphas))."""
        mx = self.xsum / self.n
        my = self.ysum / self.n
        centred = self.gram - self.n * np.outer(mx, mx)
        b = self.xy - self.n * mx * my
        evals, evecs = np.linalg.eigh(centred)
        evals = np.clip(evals, 0.0, None)
        q = evecs.T @ b
        coefs = evecs @ (q[:, None] / (evals[:, None] + np.asarray(alphas)[None, :]))
        return mx, np.asarray(my), coefs


def _check(vectors: ArrayLike, y: ArrayLike | None = None) -> tuple[np.ndarray, np.ndarray | None]:
    V = np.asarray(vectors, dtype=np.float64)
    if V.ndim != 2:
        raise InputError(f"vectors must be 2-D, got shape {V.shape}", field="vectors")
    if not np.isfinite(V).all():
        raise InputError("vectors contain NaN or infinite values", field="vectors")
    if y is None:
        return V, None
    t = np.asarray(y, dtype=np.float64)
    if t.shape != (V.shape[0],):
        raise InputError(f"y must be 1-D with {V.shape[0]} values, got {t.shape}", field="y")
    return V, t


def ridge_fit(vectors: ArrayLike, y: ArrayLike, alpha: float) -> tuple[np.ndarray, float]:
    """``(coef, intercept)`` of one ridge fit (the same solver as below)."""
    V, t = _check(vectors, y)
    assert t is not None
    if len(t) < 2:
        raise InputError("ridge needs at least 2 rows", field="y")
    st = _Stats.empty(V.shape[1])
    st.add(V, t)
    mx, my, coefs = st.solve([float(alpha)])
    coef = coefs[:, 0]
    return coef, float(my - mx @ coef)


def chunk_starts(n: int, *, n_chunks: int = 40, min_rows: int = 50) -> np.ndarray:
    """Start positions of consecutive chunks of ``n`` time-sorted rows."""
    size = max(min_rows, int(np.ceil(n / max(1, n_chunks))))
    return np.arange(0, n, size, dtype=np.int64)


def time_ordered_predictions(
    vectors: ArrayLike,
    y: ArrayLike,
    times: ArrayLike,
    *,
    maturity_s: float,
    alphas: Sequence[float] | np.ndarray = ALPHAS,
    n_chunks: int = 40,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Out-of-sample ridge predictions for every row, in time order.

    Rows must be sorted by time; ``y`` is NaN where the metric is missing
    (never fitted on). Row ``i`` in the chunk starting at time ``s`` gets a
    prediction from a ridge fitted on rows with ``time <= s - maturity_s``
    (all at or before row ``i``'s own time minus the maturity window); NaN
    when fewer than ``MIN_FIT_ROWS`` such rows exist.

    Returns ``(pred, alpha_used, errors)``: the prediction per row, the
    penalty each row's fit used, and each row's squared error under every
    penalty of ``alphas`` (NaN where there is no prediction or target).
    """
    # One BLAS thread: these are small matrices, and on shared cores
    # OpenBLAS's spinning threads made this step twenty times slower.
    with threadpool_limits(limits=1):
        return _time_ordered(vectors, y, times, maturity_s=maturity_s, alphas=alphas, n_chunks=n_chunks)


def _time_ordered(
    vectors: ArrayLike,
    y: ArrayLike,
    times: ArrayLike,
    *,
    maturity_s: float,
    alphas: Sequence[float] | np.ndarray,
    n_chunks: int,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    V, t = _check(vectors, y)
    assert t is not None
    ts = np.asarray(times, dtype=np.float64)
    if ts.shape != t.shape:
        raise InputError("times must have one value per row", field="times")
    if len(ts) > 1 and np.any(np.diff(ts) < 0):
        raise InputError("rows must be sorted by time", field="times")
    n, d = V.shape
    grid = np.asarray(alphas, dtype=np.float64)
    pred = np.full(n, np.nan)
    used = np.full(n, np.nan)
    errors = np.full((n, len(grid)), np.nan)
    known = ~np.isnan(t)
    st = _Stats.empty(d)
    added = 0  # rows [0, added) are in st (those with a target)
    starts = chunk_starts(n, n_chunks=n_chunks)
    for j, start in enumerate(starts):
        stop = int(starts[j + 1]) if j + 1 < len(starts) else n
        horizon = int(np.searchsorted(ts, ts[start] - maturity_s, side="right"))
        if horizon > added:
            rows = np.arange(added, horizon)[known[added:horizon]]
            st.add(V[rows], t[rows])
            added = horizon
        if st.n < MIN_FIT_ROWS:
            continue
        # Penalty: least squared error so far on rows settled by this chunk's start.
        seen = errors[:horizon]
        ok = ~np.isnan(seen[:, 0])
        alpha_i = (
            int(np.argmin(seen[ok].mean(axis=0)))
            if ok.sum() >= MIN_FIT_ROWS
            else int(np.argmin(np.abs(grid - DEFAULT_ALPHA)))
        )
        mx, my, coefs = st.solve(grid)
        p_all = my + (V[start:stop] - mx) @ coefs  # (rows, alphas)
        pred[start:stop] = p_all[:, alpha_i]
        used[start:stop] = grid[alpha_i]
        have = known[start:stop]
        errors[start:stop][have] = (p_all[have] - t[start:stop][have, None]) ** 2
    return pred, used, errors


class RidgeText:
    """Ridge on embedding vectors with its penalty chosen in time order."""

    def __init__(
        self, *, alphas: Sequence[float] = ALPHAS, maturity_s: float = 48 * 3600.0, n_chunks: int = 40
    ) -> None:
        self.alphas = alphas
        self.maturity_s = maturity_s
        self.n_chunks = n_chunks

    def fit(self, vectors: ArrayLike, y: ArrayLike, times: ArrayLike) -> Self:
        """Fit on every row with a target; rows sorted by time. Also keeps
        the time-ordered predictions of the rows (``oof_``)."""
        V, t = _check(vectors, y)
        assert t is not None
        known = ~np.isnan(t)
        if known.sum() < MIN_FIT_ROWS:
            raise InputError(
                f"{int(known.sum())} rows with a target; the text model needs {MIN_FIT_ROWS}", field="y"
            )
        grid = np.asarray(self.alphas, dtype=np.float64)
        pred, _, errors = time_ordered_predictions(
            V, t, times, maturity_s=float(self.maturity_s), alphas=grid, n_chunks=int(self.n_chunks)
        )
        ok = ~np.isnan(errors[:, 0])
        self.alpha_errors_ = errors[ok].mean(axis=0) if ok.any() else np.full(len(grid), np.nan)
        self.alpha_ = float(
            grid[int(np.nanargmin(self.alpha_errors_))]
            if ok.any()
            else grid[int(np.argmin(np.abs(grid - DEFAULT_ALPHA)))]
        )
        self.coef_, self.intercept_ = ridge_fit(V[known], t[known], self.alpha_)
        self.oof_ = pred
        self.n_features_in_ = V.shape[1]
        return self

    def _check_fitted(self) -> None:
        if not hasattr(self, "coef_"):
            raise NotFittedError("RidgeText is not fitted yet", where="RidgeText")

    def predict(self, vectors: ArrayLike) -> np.ndarray:
        self._check_fitted()
        V, _ = _check(vectors)
        if V.shape[1] != self.n_features_in_:
            raise InputError(
                f"vectors have {V.shape[1]} values, the model expects {self.n_features_in_}", field="vectors"
            )
        return cast(np.ndarray, V @ self.coef_ + self.intercept_)

    def save(self, directory: str | os.PathLike[str]) -> Path:
        self._check_fitted()
        root = Path(directory)
        root.mkdir(parents=True, exist_ok=True)
        np.save(root / "coef.npy", self.coef_)
        cfg: dict[str, Any] = {
            "kind": "RidgeText",
            "alpha": self.alpha_,
            "intercept": self.intercept_,
            "alphas": list(map(float, self.alphas)),
            "alpha_errors": [float(e) for e in self.alpha_errors_],
            "maturity_s": float(self.maturity_s),
            "n_chunks": int(self.n_chunks),
        }
        tmp = root / (CONFIG_FILE + ".tmp")
        tmp.write_text(json.dumps(cfg, indent=2))
        tmp.replace(root / CONFIG_FILE)
        return root

    @classmethod
    def load(cls, directory: str | os.PathLike[str]) -> Self:
        root = Path(directory)
        if not (root / CONFIG_FILE).is_file():
            raise NotFound(f"no text model at {root}", where="RidgeText.load")
        try:
            cfg = json.loads((root / CONFIG_FILE).read_text())
            m = cls(alphas=tuple(cfg["alphas"]), maturity_s=cfg["maturity_s"], n_chunks=cfg["n_chunks"])
            m.coef_ = np.load(root / "coef.npy")
            m.intercept_ = float(cfg["intercept"])
            m.alpha_ = float(cfg["alpha"])
            m.alpha_errors_ = np.asarray(cfg["alpha_errors"], dtype=float)
            m.n_features_in_ = int(m.coef_.shape[0])
        except (OSError, ValueError, KeyError) as exc:
            raise StoreError(f"unreadable text model: {exc}", where=str(root)) from exc
        return m
