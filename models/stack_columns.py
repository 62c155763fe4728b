"""The columns a stacked forecaster reads beyond ``models.features``: the text
model's out-of-sample prediction (``text_ridge``), the account code and the
learned neighbours' time-ordered forecast (``learned_neighbours``)."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from models import features as F
from models.errors import InputError
from models.learned_neighbours import LearnedNeighbours
from models.textmodel import RidgeText
from models.training_matrix import account_baselines

#: The extra columns, in the order they follow ``models.features.FEATURE_NAMES``.
EXTRA_NAMES: tuple[str, ...] = ("text_ridge", "account_code", "learned_neighbours")


@dataclass(slots=True)
class ExtraModels:
    """The fitted models behind the extra columns (None: too few posts)."""

    text: RidgeText | None = None
    learned: LearnedNeighbours | None = None


def extra_columns(
    history: F.History, *, maturity_s: float, now: float, params: F.FeatureParams | None = None
) -> tuple[np.ndarray, ExtraModels]:
    """``EXTRA_NAMES`` for every post of ``history``, and the models fitted
    on every post settled by ``now`` (for drafts).

    ``text_ridge`` of a post comes from a ridge fitted only on posts settled
    before the post (``models.textmodel.time_ordered_predictions``);
    ``learned_neighbours`` from a projection fitted on the earliest settled
    posts and neighbours settled before the post (``models.learned_neighbours``).
    """
    params = params or F.FeatureParams(maturity_s=maturity_s)
    settled = F.eligible(history, now, F.FeatureParams(maturity_s=maturity_s))
    y = np.where(settled, history.log_target, np.nan)
    models = ExtraModels()
    pred = np.full(len(history), np.nan)
    learned = np.full(len(history), np.nan)
    if history.vectors.ndim == 2 and history.vectors.shape[1] > 0 and settled.sum() >= 30:
        models.text = RidgeText(maturity_s=maturity_s).fit(history.vectors, y, history.time)
        pred = models.text.oof_
        try:
            models.learned = LearnedNeighbours(maturity_s=maturity_s).fit(
                history.vectors, y, account_baselines(history, params), history.time
            )
            learned = models.learned.oof_
        except InputError:  # too few settled posts: the column stays empty
            models.learned = None
    return np.column_stack([pred, history.account.astype(np.float64), learned]), models


def draft_columns(
    models: ExtraModels,
    vectors: np.ndarray,
    accounts: Sequence[int],
    baselines: np.ndarray,
    names: Sequence[str] = EXTRA_NAMES,
) -> np.ndarray:
    """The extra columns ``names`` for drafts, from the fitted models."""
    n = len(accounts)
    V = np.asarray(vectors).reshape(n, -1)
    cols = {
        "text_ridge": models.text.predict(V) if models.text is not None else np.full(n, np.nan),
        "account_code": np.asarray(accounts, dtype=np.float64),
        "learned_neighbours": models.learned.predict(V, baselines)
        if models.learned is not None
        else np.full(n, np.nan),
    }
    return np.column_stack([cols[c] for c in names])


def duplicate_columns(X: np.ndarray) -> set[int]:
    """Columns equal (NaN included) to an earlier column on these rows."""
    out: set[int] = set()
    for j in range(X.shape[1]):
        for i in range(j):
            if i not in out and np.array_equal(X[:, i], X[:, j], equal_nan=True):
                out.add(j)
                break
    return out
