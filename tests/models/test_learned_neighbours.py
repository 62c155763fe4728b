"""The learned-neighbours candidate: the MLKR gradient against a finite
difference of the loss written out from its paper, learned neighbours
against cosine neighbours on a generator with a known direction, the time
order of its column, its persistence, and the rule that drops it from the
blend when it does not help."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pytest
from scipy.stats import spearmanr

from models.errors import InputError, NotFittedError
from models.learned_neighbours import LearnedNeighbours, choose_anchor
from models.learned_retrieval import MLKR, mlkr_loss_grad
from models.learned_rule import improves
from models.stacking import ALL_FEATURES, StackedForecaster

DAY = 86400.0


def _written_out_loss(A: np.ndarray, X: np.ndarray, y: np.ndarray) -> float:
    """Weinberger & Tesauro (AISTATS 2007), eqs. 2-3: the leave-one-out
    kernel regression estimate yhat_i = sum_{j != i} y_j k_ij / sum_{j != i} k_ij
    with k_ij = exp(-||A(x_i - x_j)||^2), and L = sum_i (y_i - yhat_i)^2
    (here divided by n, as the module fits it). Pair by pair, in loops."""
    n = len(y)
    total = 0.0
    for i in range(n):
        num = den = 0.0
        for j in range(n):
            if j == i:
                continue
            diff = A @ (X[i] - X[j])
            k = float(np.exp(-float(diff @ diff)))
            num += y[j] * k
            den += k
        total += (y[i] - num / den) ** 2
    return total / n


def test_mlkr_gradient_matches_a_finite_difference_of_the_paper_loss() -> None:
    rng = np.random.default_rng(0)
    X = rng.normal(size=(25, 6))
    y = rng.normal(size=25)
    A = rng.normal(scale=0.4, size=(3, 6))
    loss, grad = mlkr_loss_grad(A, X, y)
    assert loss == pytest.approx(_written_out_loss(A, X, y), rel=1e-10)
    eps = 1e-6
    fd = np.zeros_like(A)
    for idx in np.ndindex(*A.shape):
        up, down = A.copy(), A.copy()
        up[idx] += eps
        down[idx] -= eps
        fd[idx] = (_written_out_loss(up, X, y) - _written_out_loss(down, X, y)) / (2 * eps)
    np.testing.assert_allclose(grad, fd, rtol=1e-5, atol=1e-8)


def _planted(rng: np.random.Generator, n: int, d: int = 48) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Unit vectors whose residual is a smooth function of one direction of
    low variance (half the others'); the other d - 1 directions are noise,
    and they dominate cosine similarity. Times a day apart, baseline 2."""
    V = rng.normal(size=(n, d))
    V[:, 3] *= 0.5
    V /= np.linalg.norm(V, axis=1, keepdims=True)
    signal = np.tanh(3.0 * np.sqrt(d) * V[:, 3])  # V[:, 3] has sd about 0.5/sqrt(d)
    y = 2.0 + signal + rng.normal(scale=0.3, size=n)
    return V.astype(np.float32), y, signal


def _cosine_neighbours(
    V: np.ndarray, res: np.ndarray, rows: np.ndarray, limit: np.ndarray, k: int
) -> np.ndarray:
    """Mean residual of the k most cosine-similar earlier posts (an
    independent computation on the raw vectors: the frozen retrieval)."""
    out = np.empty(len(rows))
    for t, i in enumerate(rows):
        sims = V[: limit[t]] @ V[i]
        top = np.argsort(-sims, kind="stable")[:k]
        out[t] = res[top].mean()
    return out


def test_learned_neighbours_beat_cosine_neighbours_on_a_planted_direction() -> None:
    rng = np.random.default_rng(1)
    n = 1500
    V, y, signal = _planted(rng, n)
    times = np.arange(n) * DAY
    base = np.full(n, 2.0)
    # 16 of 48 values (the served 32 of 384 leave more room; here 32 of 48
    # fit the 480 rows' noise at the first step and keep the start).
    m = LearnedNeighbours(n_components=16, max_fit_rows=600, fit_share=0.4, maturity_s=2 * DAY).fit(
        V, y, base, times
    )
    rows = np.flatnonzero(np.isfinite(m.oof_))
    assert rows[0] >= 600  # nothing before the projection's block settled
    learned = m.oof_[rows] - 2.0
    limit = np.searchsorted(times, times[rows] - 2 * DAY, side="right")
    cosine = _cosine_neighbours(V, y - 2.0, rows, limit, k=20)
    # Spearman's rank correlation with the planted signal (scipy).
    r_learned = spearmanr(learned, signal[rows]).statistic
    r_cosine = spearmanr(cosine, signal[rows]).statistic
    assert r_learned > r_cosine + 0.2, (r_learned, r_cosine)
    mae_learned = np.mean(np.abs(learned - (y[rows] - 2.0)))
    mae_cosine = np.mean(np.abs(cosine - (y[rows] - 2.0)))
    assert mae_learned < mae_cosine


def test_a_rows_value_ignores_later_targets() -> None:
    """No leakage: a row's value uses its projection's block (earlier posts)
    and neighbours settled before it; changing later posts' targets leaves
    it and every earlier row unchanged."""
    rng = np.random.default_rng(2)
    n, maturity = 700, 2 * DAY
    V, y, _ = _planted(rng, n, d=24)
    times = np.sort(rng.uniform(0, 400 * DAY, n))
    base = np.full(n, 2.0)
    a = LearnedNeighbours(max_fit_rows=250, maturity_s=maturity, max_iter=15).fit(V, y, base, times)
    i = 520
    assert np.isfinite(a.oof_[i])
    later = times > times[i] - maturity  # not settled when post i went out (itself included)
    y2 = np.where(later, rng.uniform(-5, 10, n), y)
    b = LearnedNeighbours(max_fit_rows=250, maturity_s=maturity, max_iter=15).fit(V, y2, base, times)
    np.testing.assert_array_equal(a.oof_[: i + 1], b.oof_[: i + 1])
    assert not np.allclose(a.oof_[-50:], b.oof_[-50:])  # later rows do see them


def test_learned_neighbours_round_trip(tmp_path: Path) -> None:
    rng = np.random.default_rng(3)
    V, y, _ = _planted(rng, 500, d=24)
    m = LearnedNeighbours(max_fit_rows=200, max_iter=10).fit(V, y, np.full(500, 2.0), np.arange(500) * DAY)
    drafts = _planted(rng, 30, d=24)[0]
    base = rng.normal(size=30)
    before = m.predict(drafts, base)
    m.save(tmp_path / "learned")
    back = LearnedNeighbours.load(tmp_path / "learned")
    np.testing.assert_array_equal(back.predict(drafts, base), before)
    assert back.get_params() == m.get_params()
    # A draft's value is its anchored baseline plus a mean of stored
    # residuals, so it lies within their range.
    lo, hi = m.bank_residuals_.min(), m.bank_residuals_.max()
    rest = before - m.anchor_ * base
    assert np.all((rest >= lo - 1e-9) & (rest <= hi + 1e-9))
    assert back.anchor_ == m.anchor_
    with pytest.raises(NotFittedError):
        LearnedNeighbours().predict(drafts, base)
    with pytest.raises(InputError, match="k must be"):
        LearnedNeighbours(k=0).fit(V, y, np.full(500, 2.0), np.arange(500) * DAY)


def test_a_drafts_value_is_the_kernel_mean_of_its_nearest_bank_rows() -> None:
    # Written out from the module's definition with plain numpy, by brute
    # force over the whole bank: the k nearest in the projected space by
    # squared distance, weighted exp(-(d - d_min)). Repeated drafts (an hour
    # sweep's slots) get the value a single one gets.
    rng = np.random.default_rng(4)
    V, y, _ = _planted(rng, 400, d=24)
    base0, times = np.full(400, 2.0), np.arange(400) * DAY
    m = LearnedNeighbours(max_fit_rows=150, max_iter=8, k=7).fit(V, y, base0, times)
    drafts = _planted(rng, 5, d=24)[0]
    drafts = np.vstack([drafts, drafts[[1, 1, 3]]])
    base = rng.normal(size=len(drafts))
    Z = m.projection_.transform(drafts)
    bank = m.bank_vectors_.astype(np.float64)
    want = []
    for z, b0 in zip(Z, base, strict=True):
        d = ((bank - z) ** 2).sum(axis=1)
        near = np.argsort(d)[:7]
        w = np.exp(-(d[near] - d[near].min()))
        want.append(m.anchor_ * b0 + float(w @ m.bank_residuals_[near]) / float(w.sum()))
    got = m.predict(drafts, base)
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-5)  # float32 distances in the index
    flat = m.predict(drafts, np.zeros(len(drafts)))  # the neighbours' part alone
    assert flat[5] == flat[6] == flat[1] and flat[7] == flat[3]
    np.testing.assert_array_equal(m.predict(drafts[:1], base[:1]), got[:1])


def test_the_baseline_anchors_the_target_only_where_it_carries_the_level() -> None:
    rng = np.random.default_rng(6)
    n = 800
    V, _, signal = _planted(rng, n, d=24)
    level = rng.choice([1.0, 4.0, 7.0], size=n)  # three accounts far apart
    y = level + signal + rng.normal(scale=0.3, size=n)
    assert choose_anchor(V, y, level + rng.normal(scale=0.1, size=n), 20) == 1.0
    # A "baseline" that is pure noise around the level of the whole history.
    noise = y.mean() + rng.normal(scale=2.0, size=n)
    assert choose_anchor(V, y - level, noise, 20) == 0.0
    # Weight 0: a post without a baseline still gets a value.
    b = noise.copy()
    b[700] = np.nan
    m = LearnedNeighbours(max_fit_rows=300, max_iter=5).fit(V, y - level, b, np.arange(n) * DAY)
    assert m.anchor_ == 0.0 and np.isfinite(m.oof_[700])


def test_mlkr_keeps_the_iterate_best_on_later_rows() -> None:
    rng = np.random.default_rng(4)
    V, y, _ = _planted(rng, 400, d=24)
    p = MLKR(n_components=4, max_iter=20).fit(V, y)
    # The kept iterate is never worse on the held-out later rows than the start.
    assert p.validation_loss_ <= p.validation_start_
    assert p.components_.shape == (4, 24)


# The rule that keeps it --------------------------------------------------------


SMALL: dict[str, Any] = {
    "max_estimators": 60,
    "early_stopping_rounds": 10,
    "num_leaves": 7,
    "min_child_samples": 10,
    "num_threads": 1,
}


def _rows(rng: np.random.Generator, n: int, learned_signal: float) -> tuple[np.ndarray, np.ndarray]:
    """Feature rows where part of the target is seen only by the learned
    column (``learned_signal`` of it) and the rest by the baseline."""
    col = {nm: i for i, nm in enumerate(ALL_FEATURES)}
    X = rng.normal(size=(n, len(ALL_FEATURES)))
    X[:, col["account_code"]] = 0
    level, text = rng.normal(size=n), rng.normal(size=n)
    X[:, col["baseline"]] = level
    X[:, col["team_median"]] = level + rng.normal(scale=0.8, size=n)
    X[:, col["text_ridge"]] = level + rng.normal(scale=0.8, size=n)
    X[:, col["learned_neighbours"]] = level + learned_signal * text + rng.normal(scale=0.3, size=n)
    y = level + text + rng.normal(scale=0.3, size=n)
    return X, y


def test_the_candidate_is_kept_only_when_it_helps() -> None:
    rng = np.random.default_rng(5)
    X, y = _rows(rng, 1100, learned_signal=1.0)
    m = StackedForecaster(**SMALL).fit(X[:800], y[:800], X[800:], y[800:], feature_names=ALL_FEATURES)
    assert m.learned_in_use_ and m.weights_["learned_neighbours"] > 0.3
    assert m.summary()["learned_neighbours_in_use"] is True
    # Its part of the median is explained through its own column.
    med = m.predict(X[800:])[1]
    np.testing.assert_allclose(m.contributions(X[800:]).sum(axis=1), med, atol=1e-6)
    # The same rows with a learned column that carries only noise.
    X, y = _rows(rng, 1100, learned_signal=0.0)
    X[:, ALL_FEATURES.index("learned_neighbours")] += rng.normal(scale=2.0, size=1100)
    m = StackedForecaster(**SMALL).fit(X[:800], y[:800], X[800:], y[800:], feature_names=ALL_FEATURES)
    assert not m.learned_in_use_
    assert m.weights_["learned_neighbours"] == 0.0
    assert m.summary()["learned_neighbours_in_use"] is False
    np.testing.assert_allclose(m.median_without_learned(X[800:]), m.predict(X[800:])[1])
    # Not offered at all: never used, even where it would help.
    X, y = _rows(rng, 1100, learned_signal=1.0)
    off = StackedForecaster(**SMALL, learned_neighbours=False).fit(
        X[:800], y[:800], X[800:], y[800:], feature_names=ALL_FEATURES
    )
    assert not off.learned_in_use_ and off.weights_["learned_neighbours"] == 0.0
    assert "learned_neighbours" not in off.boosted_columns_


def test_improves_needs_no_worse_on_both_and_better_on_one() -> None:
    base = {"mae_log": 0.5, "spearman": 0.3}
    assert improves({"mae_log": 0.49, "spearman": 0.3}, base)
    assert improves({"mae_log": 0.5, "spearman": 0.31}, base)
    assert not improves(dict(base), base)  # a tie: not kept
    assert not improves({"mae_log": 0.4, "spearman": 0.29}, base)
    assert not improves({"mae_log": 0.51, "spearman": 0.5}, base)


def test_a_model_without_the_learned_column_never_uses_it() -> None:
    """Rows made before the column existed (a saved model's feature names
    end at the account code) fit and explain as before."""
    rng = np.random.default_rng(7)
    X, y = _rows(rng, 1000, learned_signal=1.0)
    names = [c for c in ALL_FEATURES if c != "learned_neighbours"]
    keep = [ALL_FEATURES.index(c) for c in names]
    m = StackedForecaster(**SMALL).fit(X[:700, keep], y[:700], X[700:, keep], y[700:], feature_names=names)
    assert not m.learned_in_use_ and m.weights_["learned_neighbours"] == 0.0
    med = m.predict(X[700:, keep])[1]
    np.testing.assert_allclose(m.contributions(X[700:, keep]).sum(axis=1), med, atol=1e-6)


@pytest.mark.parametrize(("signal", "kept"), [(1.0, True), (0.0, False)])
def test_the_backtest_keeps_the_candidate_only_when_it_helps(signal: float, kept: bool) -> None:
    from models.backtest import run_backtest

    rng = np.random.default_rng(8)
    X, y = _rows(rng, 1600, learned_signal=signal)
    if not kept:
        X[:, ALL_FEATURES.index("learned_neighbours")] += rng.normal(scale=2.0, size=1600)
    bt = run_backtest(
        X, y, np.arange(1600.0), feature_names=ALL_FEATURES, n_folds=3, params=SMALL, timing_only=False
    )
    verdict = bt["learned_neighbours"]
    assert verdict["in_use"] is kept
    assert (verdict["folds_in_use"] > 0) is kept
    if kept:  # it did help: the served forecast beat the one without it
        assert verdict["with"]["mae_log"] < verdict["without"]["mae_log"]
    else:
        assert verdict["with"] == verdict["without"]
