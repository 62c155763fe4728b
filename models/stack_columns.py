"""The columns a stacked forecaster reads beyond ``models.features``: the text
model's out-of-sample prediction (``text_ridge``) and the account code."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from models import features as F
from models.textmodel import RidgeText


def extra_columns(
    history: F.History, *, maturity_s: float, now: float
) -> tuple[np.ndarray, RidgeText | None]:
    """``text_ridge`` and ``account_code`` for every post of ``history``,
    and the text model fitted on every post settled by ``now`` (for drafts).

    ``text_ridge`` of a post comes from a ridge fitted only on posts settled
    before the post (``models.textmodel.time_ordered_predictions``).
    """
    settled = F.eligible(history, now, F.FeatureParams(maturity_s=maturity_s))
    y = np.where(settled, history.log_target, np.nan)
    text: RidgeText | None = None
    pred = np.full(len(history), np.nan)
    if history.vectors.ndim == 2 and history.vectors.shape[1] > 0 and settled.sum() >= 30:
        text = RidgeText(maturity_s=maturity_s).fit(history.vectors, y, history.time)
        pred = text.oof_
    return np.column_stack([pred, history.account.astype(np.float64)]), text


def draft_columns(text: RidgeText | None, vectors: np.ndarray, accounts: Sequence[int]) -> np.ndarray:
    """The same two columns for drafts: the fitted text model's prediction."""
    n = len(accounts)
    pred = text.predict(np.asarray(vectors).reshape(n, -1)) if text is not None else np.full(n, np.nan)
    return np.column_stack([pred, np.asarray(accounts, dtype=np.float64)])


def duplicate_columns(X: np.ndarray) -> set[int]:
    """Columns equal (NaN included) to an earlier column on these rows."""
    out: set[int] = set()
    for j in range(X.shape[1]):
        for i in range(j):
            if i not in out and np.array_equal(X[:, i], X[:, j], equal_nan=True):
                out.add(j)
                break
    return out
