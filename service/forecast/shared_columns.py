"""The "posts sharing this draft's key terms" columns (``models.shared_terms``)
for training rows and drafts, and the rule that keeps them only where the
time-ordered backtest improves.

In training (``SOUNDING_SHARED_TERMS=auto``, the default) the columns are
tried: by hashtags when at least ``MIN_HASHTAG_SHARE`` of the training rows
have an earlier settled post sharing one, else by each post's rarest words.
The backtest is run again with them; they are kept only when its pooled
MAE(log) is lower and its Spearman no lower than without them. The
decision and both sets of figures are in the backtest report
(``shared_terms``). ``off`` never tries them; ``hashtags`` or
``rare_terms`` keeps that kind whatever the backtest says.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from models import features as F
from models import shared_terms as S
from models.backtest import run_backtest
from models.stacking import ALL_FEATURES, ALL_GROUPS, STACK_PARAMS
from service.history.view import HistoryView
from service.storage import keywords
from service.storage.store import Store

#: Kinds of key terms, and what SOUNDING_SHARED_TERMS may say.
KINDS: tuple[str, ...] = ("hashtags", "rare_terms")
#: Rows that must have an earlier post sharing a hashtag for hashtags to be tried.
MIN_HASHTAG_SHARE = 0.1
#: Explanation groups with the columns: what similar posts did, like the precedents.
GROUPS: dict[str, str] = {**ALL_GROUPS, **dict.fromkeys(S.NAMES, "precedents")}


def view_tokens(view: HistoryView, store: Store) -> list[list[str]]:
    """Each view row's tokens: from its text, or from the keyword index when
    the view was kept without texts (``service.history.viewcache``)."""
    if view.frame is not None and "text" in view.frame:
        return [keywords.words(t) for t in view.frame["text"]]
    with store.engine.connect() as conn:
        stored = keywords.stored_words(conn, [int(p) for p in view.history.pk])
    return [stored.get(int(p), []) for p in view.history.pk]


@dataclass(slots=True)
class SharedTerms:
    """The history's key terms of one kind, ready for rows and drafts."""

    kind: str
    keys: list[frozenset[str]]
    index: S.TermIndex
    df: Counter[str] | None

    @classmethod
    def of(cls, view: HistoryView, tokens: Sequence[Sequence[str]], kind: str) -> SharedTerms:
        # Drafts are keyed by the same document frequencies as the history.
        df = None if kind == "hashtags" else S.document_frequency(tokens)
        keys = S.key_terms(tokens, hashtags_only=df is None, df=df)
        return cls(kind, keys, S.TermIndex(view.history, keys), df)

    def rows(self, rows: np.ndarray, params: F.FeatureParams) -> np.ndarray:
        """The two columns of History ``rows``, each at its own time."""
        return self.index.columns(self.keys, params, rows)

    def drafts(self, texts: Sequence[str], times: Sequence[float], params: F.FeatureParams) -> np.ndarray:
        """The two columns of drafts, each at the time its neighbours are taken."""
        return np.array(
            [
                self.index.stats(S.keys_of(keywords.words(x), self.df), t, params)
                for x, t in zip(texts, times, strict=True)
            ],
            dtype=np.float64,
        ).reshape(len(texts), 2)


def _figures(report: dict[str, Any]) -> dict[str, Any]:
    m = report["model"]
    return {k: m[k] for k in ("mae_log", "spearman", "coverage", "mean_width_log")}


def decide(
    setting: str,
    view: HistoryView,
    store: Store,
    params: F.FeatureParams,
    rows: np.ndarray,
    X: np.ndarray,
    y: np.ndarray,
    times: np.ndarray,
    base: dict[str, Any],
    **backtest_options: Any,
) -> tuple[np.ndarray | None, dict[str, Any] | None, dict[str, Any]]:
    """Whether the columns join the model: (their values for ``rows``, in the
    order of ``X``, or None; the backtest with them, or None; the decision
    as the backtest report shows it). ``base`` is the backtest without them,
    run with ``backtest_options``."""
    if setting == "off":
        return None, None, {"tried": False, "kept": False, "kind": None, "setting": setting}
    tokens = view_tokens(view, store)
    tags = SharedTerms.of(view, tokens, "hashtags")
    tag_cols = tags.rows(rows, params)
    share = float((tag_cols[:, 0] > 0).mean()) if len(rows) else 0.0
    kind = setting if setting in KINDS else ("hashtags" if share >= MIN_HASHTAG_SHARE else "rare_terms")
    cols = tag_cols if kind == "hashtags" else SharedTerms.of(view, tokens, kind).rows(rows, params)
    rep = run_backtest(
        np.hstack([X, cols]),
        y,
        times,
        feature_names=ALL_FEATURES + S.NAMES,
        params=STACK_PARAMS,
        **backtest_options,
    )
    without, with_ = _figures(base), _figures(rep)
    better = with_["mae_log"] < without["mae_log"] and with_["spearman"] >= without["spearman"]
    kept = better if setting == "auto" else True
    decision = {
        "tried": True,
        "kept": kept,
        "kind": kind,
        "setting": setting,
        "rule": "kept when the backtest's MAE(log) is lower and its Spearman no lower with the columns",
        "rows_sharing_a_hashtag": share,
        "rows_with_shared_posts": float((cols[:, 0] > 0).mean()) if len(rows) else 0.0,
        "without": without,
        "with": with_,
    }
    return (cols, rep, decision) if kept else (None, None, decision)
