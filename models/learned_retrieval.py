"""A metric-aware projection of the text vectors: MLKR, metric learning for
kernel regression (Weinberger & Tesauro, AISTATS 2007).

A linear map ``A`` (r x d) is learnt so that the leave-one-out Gaussian
kernel regression in the projected space predicts a target well:

    k_ij  = exp(-||A (x_i - x_j)||^2)                (k_ii = 0)
    yhat_i = sum_j y_j k_ij / sum_j k_ij
    L(A)  = mean_i (yhat_i - y_i)^2

Its gradient (the paper's, with the sign and the 1/n of this mean):

    dL/dA = -(4/n) A sum_i (yhat_i - y_i) sum_j (y_j - yhat_i) k_ij / K_i  x_ij x_ij'

computed as ``-(4/n) (X A')' M X`` with ``M = diag(rowsum W + colsum W) - W - W'``
and ``W_ij = (yhat_i - y_i)(y_j - yhat_i) k_ij / K_i``: one evaluation costs
O(n^2 r + n r d), never a d x d matrix per pair. ``A`` starts from the top
``r`` principal directions, scaled so that the kernel is neither flat nor a
spike (the scale with the least loss on a short grid), and is refined by
L-BFGS (scipy.optimize.minimize).
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any, ClassVar, Self, cast

import numpy as np
from numpy.typing import ArrayLike

from models.configfile import write_config
from models.constraints import Constraint, Interval, ParamsMixin, validate_params
from models.errors import InputError, NotFittedError, NotFound, StoreError

#: Multiples of the scale that makes the median squared projected distance 1.
INIT_SCALES: tuple[float, ...] = (0.5, 1.0, 2.0, 4.0, 8.0, 16.0)
CONFIG_FILE = "config.json"


def mlkr_loss_grad(A: np.ndarray, X: np.ndarray, y: np.ndarray) -> tuple[float, np.ndarray]:
    """The MLKR loss (mean leave-one-out squared error) and its gradient in
    ``A``, computed in the precision of ``X`` (float32 when fitting: twice as
    fast, our measurement; float64 in the gradient check)."""
    A = A.astype(X.dtype, copy=False)
    y = y.astype(X.dtype, copy=False)
    Z = X @ A.T
    sq = np.einsum("ij,ij->i", Z, Z)
    D = Z @ Z.T
    D *= -2.0
    D += sq[:, None]
    D += sq[None, :]
    np.maximum(D, 0.0, out=D)
    np.fill_diagonal(D, np.inf)
    # Each row shifted by its least distance: yhat and W are ratios within
    # a row, so the shift changes nothing but keeps exp from underflowing.
    D -= D.min(axis=1, keepdims=True)
    K = np.exp(-D, out=D)
    Ksum = K.sum(axis=1)
    yhat = (K @ y) / Ksum
    err = yhat - y
    n = len(y)
    loss = float(np.mean(err.astype(np.float64) ** 2))
    K *= (err / Ksum)[:, None]
    K *= y[None, :] - yhat[:, None]  # now W
    W = K
    M = W + W.T
    M *= -1.0
    M[np.diag_indices(n)] += W.sum(axis=1) + W.sum(axis=0)
    grad = (-4.0 / n) * ((Z.T @ M) @ X)
    return loss, grad.astype(np.float64)


def kernel_predict(Zq: np.ndarray, Zb: np.ndarray, yb: np.ndarray) -> np.ndarray:
    """Gaussian kernel regression of query rows on bank rows, projected."""
    D = (Zq**2).sum(axis=1)[:, None] + (Zb**2).sum(axis=1)[None, :] - 2.0 * (Zq @ Zb.T)
    np.maximum(D, 0.0, out=D)
    D -= D.min(axis=1, keepdims=True)
    K = np.exp(-D)
    return cast(np.ndarray, (K @ yb) / K.sum(axis=1))


class MLKR(ParamsMixin):
    """Metric learning for kernel regression: a linear map of the vectors
    learnt for leave-one-out kernel regression of ``y`` (see the module doc)."""

    _parameter_constraints: ClassVar[dict[str, Constraint]] = {
        "n_components": Interval(int, 1, 256),
        "max_iter": Interval(int, 1, 10_000),
        "tol": Interval(float, 0.0, None),
        "validation_share": Interval(float, 0.0, 0.5, closed="left"),
    }

    def __init__(
        self, *, n_components: int = 16, max_iter: int = 40, tol: float = 1e-6, validation_share: float = 0.2
    ) -> None:
        self.n_components = n_components
        self.max_iter = max_iter
        self.tol = tol
        self.validation_share = validation_share

    def fit(self, X: ArrayLike, y: ArrayLike) -> Self:
        """Rows in time order. With ``validation_share``, the loss is fitted
        on the earlier rows and the iterate kept is the one whose kernel
        regression best predicts the later rows from the earlier ones
        (early stopping in time order: with 384 x r free values, the loss
        on the fitted rows alone falls below the noise)."""
        from scipy.optimize import minimize

        validate_params(self.get_params(), self._parameter_constraints)
        V = np.asarray(X, dtype=np.float64)
        t = np.asarray(y, dtype=np.float64)
        if V.ndim != 2 or t.shape != (V.shape[0],):
            raise InputError(f"X must be (n, d) with one y per row; got {V.shape} and {t.shape}", field="X")
        n_val = int(len(t) * float(self.validation_share))
        if len(t) - n_val < 3 or not (np.isfinite(V).all() and np.isfinite(t).all()):
            raise InputError("MLKR needs at least 3 rows of finite values", field="X")
        n, d = V.shape
        r = min(int(self.n_components), d)
        # PCA directions of the (centred) rows: distances ignore the centre.
        _, _, Vt = np.linalg.svd(V - V.mean(axis=0), full_matrices=False)
        A0 = Vt[:r]
        Z = V @ A0.T
        sample = Z[np.linspace(0, n - 1, min(n, 300)).astype(int)]
        gaps = ((sample[:, None, :] - sample[None, :, :]) ** 2).sum(-1)
        med = float(np.median(gaps[np.triu_indices(len(sample), 1)]))
        unit = 1.0 / np.sqrt(med) if med > 0 else 1.0
        Xf, tf = V[: n - n_val].astype(np.float32), t[: n - n_val].astype(np.float32)
        Xv, tv = V[n - n_val :], t[n - n_val :]

        def held(a: np.ndarray) -> float:
            if n_val == 0:
                return 0.0
            A = a.reshape(r, d)
            return float(np.mean((kernel_predict(Xv @ A.T, Xf @ A.T.astype(np.float32), tf) - tv) ** 2))

        trials = [(mlkr_loss_grad(A0 * (s * unit), Xf, tf)[0], s) for s in INIT_SCALES]
        self.init_loss_, best = min(trials)
        start = (A0 * (best * unit)).ravel()
        kept = [(held(start), 0, start)]

        def fun(a: np.ndarray) -> tuple[float, np.ndarray]:
            loss, g = mlkr_loss_grad(a.reshape(r, d), Xf, tf)
            return loss, g.ravel()

        def seen(a: np.ndarray) -> None:
            if n_val:
                kept.append((held(a), len(kept), a.copy()))

        res = minimize(
            fun,
            start,
            jac=True,
            method="L-BFGS-B",
            callback=seen,
            options={"maxiter": int(self.max_iter), "ftol": float(self.tol)},
        )
        if n_val:
            self.validation_loss_, self.best_iter_, a = min(kept, key=lambda k: (k[0], k[1]))
            self.validation_start_ = kept[0][0]
        else:
            a, self.best_iter_ = res.x, int(res.nit)
            self.validation_loss_ = self.validation_start_ = float("nan")
        self.components_ = np.asarray(a, dtype=np.float64).reshape(r, d)
        self.loss_ = float(res.fun)
        self.n_iter_ = int(res.nit)
        self.n_features_in_ = d
        return self

    def _check_fitted(self) -> None:
        if not hasattr(self, "components_"):
            raise NotFittedError("MLKR is not fitted yet", where="MLKR")

    def transform(self, X: ArrayLike) -> np.ndarray:
        self._check_fitted()
        V = np.asarray(X, dtype=np.float64)
        if V.ndim != 2 or V.shape[1] != self.n_features_in_:
            raise InputError(f"X must have {self.n_features_in_} columns, got shape {V.shape}", field="X")
        return cast(np.ndarray, V @ self.components_.T)

    def to_config(self) -> dict[str, Any]:
        self._check_fitted()
        return {
            "params": self.get_params(),
            "loss": self.loss_,
            "init_loss": self.init_loss_,
            "n_iter": self.n_iter_,
            "best_iter": self.best_iter_,
            "validation_loss": self.validation_loss_,
            "validation_start": self.validation_start_,
            "n_features_in": self.n_features_in_,
        }

    def save(self, directory: str | os.PathLike[str]) -> Path:
        root = Path(directory)
        root.mkdir(parents=True, exist_ok=True)
        np.save(root / "components.npy", self.components_)
        write_config(root, {"kind": "MLKR", **self.to_config()}, CONFIG_FILE)
        return root

    @classmethod
    def load(cls, directory: str | os.PathLike[str]) -> Self:
        root = Path(directory)
        if not (root / CONFIG_FILE).is_file():
            raise NotFound(f"no projection at {root}", where="MLKR.load")
        try:
            cfg = json.loads((root / CONFIG_FILE).read_text())
            m = cls(**cfg["params"])
            m.components_ = np.load(root / "components.npy", allow_pickle=False)
            m.loss_, m.init_loss_ = float(cfg["loss"]), float(cfg["init_loss"])
            m.n_iter_, m.n_features_in_ = int(cfg["n_iter"]), int(cfg["n_features_in"])
            m.best_iter_ = int(cfg["best_iter"])
            m.validation_loss_ = float(cfg["validation_loss"])
            m.validation_start_ = float(cfg["validation_start"])
        except (OSError, ValueError, KeyError, TypeError) as exc:
            raise StoreError(f"unreadable projection: {exc}", where=str(root)) from exc
        return m
