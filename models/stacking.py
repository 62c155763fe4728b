"""The served forecaster: candidate forecasts blended in time order, with
an additive timing component, and CQR bands on the blend.

Rows arrive sorted by time and are cut into three blocks:

    fit (first 75% of training)  ->  stack (last 25%)  ->  calibration

- Candidates, each a point forecast of the log metric:
  ``boosted`` (LightGBM, rounds chosen by early stopping on the stack
  block, then refitted on fit + stack), ``text_ridge`` (ridge on the
  embedding vectors, predicted out of sample in time order), and the simple
  forecasters: ``account_median`` (trailing median), ``precedents_median``
  (median of the 20 nearest earlier posts), ``history_median``; and
  ``learned_neighbours`` (neighbours in a projection learnt for what the
  text adds to the baseline, ``models.learned_neighbours``), kept only when
  the blend with it beats the blend without it on the later half of the
  stack block (``models.learned_rule``), and never a column of the trees.
- A timing effect (``models.timing``): fitted first, inside ``boosted``
  (the trees learn what it leaves). With ``blend_timing`` it is also offered
  to the blend as an additive column with a non-negative weight (off by
  default: on the demo it only added noise to the weights).
- Blend weights: non-negative, summing to one, least absolute error on the
  stack block from models fitted on the fit block only, with a time-ordered
  fallback to one candidate when the blend loses to a simple forecaster
  (``models.blend_lp``).
- Bands: the boosted lower/upper quantiles re-centred on the blend, then
  CQR (Romano et al. 2019) on the calibration block, which nothing above
  has seen, so the stated coverage holds for the blend. The conformal
  quantile weights the calibration scores by recency, with weights fixed in
  advance (non-exchangeable conformal prediction, Barber, Candès, Ramdas &
  Tibshirani 2023): with exchangeable rows the guarantee is unchanged, and
  when reach drifts over time the latest scores count most.

The timing component is fitted first and the boosted model learns the
rest (it corrects the smooth curve rather than shrinking it); the
``boosted`` candidate is their sum. The component's penalty is chosen in
time order, so where time carries nothing it goes to about zero. The
boosted model leaves out columns identical to an earlier column on the
training rows (one account: own-account neighbours repeat the team's).
"""

from __future__ import annotations

import json
import math
import os
from collections.abc import Sequence
from pathlib import Path
from typing import Any, Self

import numpy as np
from numpy.typing import ArrayLike
from threadpoolctl import threadpool_limits  # type: ignore[import-untyped]

from models import features as F
from models.arrays import as_matrix, as_target
from models.band_shape import choose_shrink, shaped
from models.bands import check_is_fitted, nearest_level, ordered_band, predict_booster
from models.calibration import cqr_scores, recency_weights, weighted_conformal_quantile
from models.configfile import write_config
from models.constraints import Interval, ParamsMixin
from models.errors import InputError, NotFound, StoreError
from models.learned_rule import LEARNED, choose_with_learned
from models.metrics import DEFAULT_COVERAGE, TRAINED_LEVELS
from models.regressor import QuantileForecaster
from models.stack_columns import EXTRA_NAMES, duplicate_columns
from models.timing import TimingEffect, hour_from_cyclic

#: The share of the training block the stacking weights are fitted on.
STACK_FRACTION = Interval(float, 0.05, 0.5)

#: Columns added after ``models.features.FEATURE_NAMES`` (see ``extra_columns``).
EXTRA_FEATURES: tuple[str, ...] = EXTRA_NAMES
ALL_FEATURES: tuple[str, ...] = F.FEATURE_NAMES + EXTRA_FEATURES
#: Explanation groups of the extra columns (the text model reads what past
#: posts' words did, like the precedents do).
EXTRA_GROUPS: dict[str, str] = {
    "text_ridge": "precedents",
    "account_code": "account baseline",
    "learned_neighbours": "precedents",
}
ALL_GROUPS: dict[str, str] = {**F.FEATURE_GROUPS, **EXTRA_GROUPS}

CANDIDATES: tuple[str, ...] = (
    "boosted",
    "text_ridge",
    "account_median",
    "precedents_median",
    "history_median",
    LEARNED,
)
SIMPLE: tuple[str, ...] = ("account_median", "precedents_median", "history_median")
#: Candidate -> the feature column it reads (linear candidates).
_SOURCE = {
    "text_ridge": "text_ridge",
    "account_median": "baseline",
    "precedents_median": "team_median",
    LEARNED: LEARNED,
}
CONFIG_FILE = "config.json"
FORMAT_VERSION = 1
#: What training uses. One thread: LightGBM's OpenMP threads slow down badly
#: when other work shares the cores, and the trees are the same.
STACK_PARAMS: dict[str, Any] = {
    "max_estimators": 600,
    "early_stopping_rounds": 40,
    "learning_rate": 0.06,
    "num_leaves": 15,
    "min_child_samples": 20,
    "num_threads": 1,
}


class StackedForecaster(ParamsMixin):
    """Blend of candidate forecasts with CQR bands; see the module doc."""

    def __init__(
        self,
        *,
        levels: Sequence[float] = TRAINED_LEVELS,
        max_estimators: int = 600,
        early_stopping_rounds: int = 40,
        learning_rate: float = 0.06,
        num_leaves: int = 15,
        min_child_samples: int = 20,
        stack_fraction: float = 0.25,
        boosted_timing: bool = True,
        blend_timing: bool = False,
        recency_half_life: float | None = 0.25,
        timing_bootstrap: int = 100,
        random_state: int = 0,
        num_threads: int = 1,
        force_candidate: str | None = None,
        learned_neighbours: bool = True,
    ) -> None:
        self.levels = levels
        self.max_estimators = max_estimators
        self.early_stopping_rounds = early_stopping_rounds
        self.learning_rate = learning_rate
        self.num_leaves = num_leaves
        self.min_child_samples = min_child_samples
        self.stack_fraction = stack_fraction
        self.boosted_timing = boosted_timing
        self.blend_timing = blend_timing
        self.recency_half_life = recency_half_life
        self.timing_bootstrap = timing_bootstrap
        self.random_state = random_state
        self.num_threads = num_threads
        self.force_candidate = force_candidate
        self.learned_neighbours = learned_neighbours

    def _quantile_params(self, n_estimators: int) -> dict[str, Any]:
        return {
            "levels": tuple(self.levels),
            "n_estimators": int(n_estimators),
            "learning_rate": float(self.learning_rate),
            "num_leaves": int(self.num_leaves),
            "min_child_samples": int(self.min_child_samples),
            "random_state": int(self.random_state),
            "num_threads": int(self.num_threads),
        }

    # -- columns ---------------------------------------------------------

    def _col(self, X: np.ndarray, name: str) -> np.ndarray:
        if name in self._index:
            return X[:, self._index[name]]
        return np.full(X.shape[0], np.nan)

    def _clock(self, X: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        hours = hour_from_cyclic(self._col(X, "hour_sin"), self._col(X, "hour_cos"))
        wd = np.nan_to_num(self._col(X, "weekday"))
        acc = np.nan_to_num(self._col(X, "account_code"))
        return hours, wd, acc

    def _linear(self, X: np.ndarray, fill: float) -> dict[str, np.ndarray]:
        out = {}
        for cand, src in _SOURCE.items():
            v = self._col(X, src)
            out[cand] = np.where(np.isnan(v), fill, v)
        # Without a learned value (before its projection's block settled),
        # the candidate is the account's baseline: no residual learnt.
        v = self._col(X, LEARNED)
        out[LEARNED] = np.where(np.isnan(v), out["account_median"], v)
        out["history_median"] = np.full(X.shape[0], fill)
        return out

    # -- fitting ---------------------------------------------------------

    def fit(
        self,
        X_train: ArrayLike,
        y_train: ArrayLike,
        X_cal: ArrayLike,
        y_cal: ArrayLike,
        *,
        feature_names: Sequence[str],
        cal_times: ArrayLike | None = None,
    ) -> Self:
        """Rows of each block in time order; ``cal_times`` (the calibration
        rows' times) lets rows posted together share one score weight."""
        self.__dict__.pop("_derived", None)  # quantiles of an earlier fit
        # Small linear algebra only: one BLAS thread (shared cores; see textmodel).
        with threadpool_limits(limits=1):
            return self._fit(
                X_train,
                y_train,
                X_cal,
                y_cal,
                feature_names=feature_names,
                cal_times=None if cal_times is None else np.asarray(cal_times, dtype=float),
            )

    def _fit(
        self,
        X_train: ArrayLike,
        y_train: ArrayLike,
        X_cal: ArrayLike,
        y_cal: ArrayLike,
        *,
        feature_names: Sequence[str],
        cal_times: np.ndarray | None,
    ) -> Self:
        names = [str(n) for n in feature_names]
        Xt = as_matrix("X_train", X_train, len(names))
        yt = as_target("y_train", y_train, Xt.shape[0])
        Xc = as_matrix("X_cal", X_cal, len(names))
        yc = as_target("y_cal", y_cal, Xc.shape[0])
        if len(set(names)) != len(names):
            raise InputError("feature_names must be distinct", field="feature_names")
        STACK_FRACTION.check(float(self.stack_fraction), "stack_fraction")
        self._index = {n: i for i, n in enumerate(names)}
        n = Xt.shape[0]
        cut = round(n * (1 - float(self.stack_fraction)))
        need = 2 * int(self.min_child_samples)
        if cut < need or n - cut < 20:
            raise InputError(
                f"{n} training rows are too few to fit and stack (need about "
                f"{math.ceil(max(need / (1 - self.stack_fraction), 20 / self.stack_fraction))})",
                field="X_train",
            )
        fit_idx, stack_idx = np.arange(cut), np.arange(cut, n)
        # 1. The timing component on the fit block; the boosted model learns
        #    what it leaves (it corrects the smooth effect, not shrinks it).
        hours, wd, acc = self._clock(Xt)
        fill_fit = float(np.median(yt[fit_idx]))
        lin_all = self._linear(Xt, fill_fit)
        timing_fit = TimingEffect(random_state=int(self.random_state), n_bootstrap=0).fit(
            hours[fit_idx], wd[fit_idx], acc[fit_idx], yt[fit_idx] - lin_all["account_median"][fit_idx]
        )
        tau = timing_fit.predict(hours, wd, acc)
        tau_stack = tau[stack_idx]
        # When the time-ordered choice of penalty says time carries nothing
        # (the largest penalty wins), the trees do not get the timing columns
        # either: they would only fit noise there.
        self.time_carries_nothing_ = bool(timing_fit.alpha_ >= max(timing_fit.alphas))

        # Boosted model's columns: no account code, no exact duplicates, and
        # the timing columns unless switched off or found empty above.
        skip = {"account_code", LEARNED}
        if not self.boosted_timing or self.time_carries_nothing_:
            skip |= set(F.TIMING_FEATURES)
        cols = [i for i, nm in enumerate(names) if nm not in skip]
        dup = duplicate_columns(Xt[:, cols])
        self.dropped_ = tuple(names[cols[j]] for j in sorted(dup)) + tuple(nm for nm in names if nm in skip)
        cols = [c for j, c in enumerate(cols) if j not in dup]
        self.boosted_columns_ = tuple(names[c] for c in cols)
        self._cols = cols
        # 2. Rounds by early stopping on the stack block (time-ordered validation).
        import lightgbm as lgb

        base = QuantileForecaster(**self._quantile_params(1)).booster_params(0.5)
        d_fit = lgb.Dataset(
            Xt[fit_idx][:, cols], yt[fit_idx] - tau[fit_idx], params=base, free_raw_data=False
        )
        d_val = lgb.Dataset(Xt[stack_idx][:, cols], yt[stack_idx] - tau_stack, reference=d_fit)
        early = lgb.train(
            base,
            d_fit,
            num_boost_round=int(self.max_estimators),
            valid_sets=[d_val],
            callbacks=[lgb.early_stopping(int(self.early_stopping_rounds), verbose=False)],
        )
        self.n_estimators_ = max(10, int(early.best_iteration or self.max_estimators))
        boosted_stack = early.predict(Xt[stack_idx][:, cols], num_iteration=self.n_estimators_) + tau_stack

        # 3. Blend weights on the stack block, from the fit block only.
        cands = {"boosted": boosted_stack, **{k: v[stack_idx] for k, v in lin_all.items()}}
        #    Every candidate carries the timing effect (the boosted one has it
        #    already): blending with candidates that lack it shrank the served
        #    hour curve by the boosted weight (0.66-0.79x the true range on a
        #    generator with a known curve; our measurement).
        self.timing_in_all_ = not self.time_carries_nothing_
        adj = self._with_timing(cands, tau_stack)
        refs = np.column_stack([cands[c] for c in SIMPLE])
        # 3b. The learned neighbours stay only when the blend with them beats
        #     the blend without them on the later half (models.learned_rule).
        picked = choose_with_learned(
            adj,
            yt[stack_idx],
            CANDIDATES,
            SIMPLE,
            tau_stack[:, None] if self.blend_timing else None,
            refs,
            offered=bool(self.learned_neighbours and np.isfinite(self._col(Xt, LEARNED)[stack_idx]).any()),
        )
        choice, without = picked.served, picked.without
        self.weights_without_learned_ = {
            c: float(x) for c, x in zip(CANDIDATES, without.weights, strict=True)
        }
        self.timing_in_all_without_learned_ = self.timing_in_all_ and not without.raw
        self.learned_check_: dict[str, Any] = picked.check
        self.learned_in_use_ = picked.in_use
        w = choice.weights
        g = choice.effect_weights if self.blend_timing else np.zeros(1)
        self.blend_kind_, self.fallback_to_ = choice.kind, choice.fallback_to
        if choice.raw:  # the simple forecaster as it is, without the timing effect
            self.timing_in_all_ = False
        if self.force_candidate is not None:
            # The time-ordered backtest found the blend losing to this simple
            # forecaster on earlier posts: serve it alone, as it is.
            if self.force_candidate not in CANDIDATES:
                raise InputError(f"unknown candidate {self.force_candidate!r}", field="force_candidate")
            w, g = np.array([float(c == self.force_candidate) for c in CANDIDATES]), np.zeros(1)
            self.timing_in_all_ = self.timing_in_all_without_learned_ = False
            self.weights_without_learned_ = {c: float(x) for c, x in zip(CANDIDATES, w, strict=True)}
            self.learned_in_use_ = self.force_candidate == LEARNED
            self.blend_kind_, self.fallback_to_ = "fallback", self.force_candidate
        self.weights_ = {c: float(x) for c, x in zip(CANDIDATES, w, strict=True)}
        self.timing_weight_ = float(g[0])
        self.stack_scores_ = {c: float(np.mean(np.abs(yt[stack_idx] - cands[c]))) for c in CANDIDATES}

        # 4. Refit on fit + stack for serving: timing, then boosted quantiles.
        self.history_median_ = float(np.median(yt))
        lin_train = self._linear(Xt, self.history_median_)
        self.timing_ = TimingEffect(
            random_state=int(self.random_state), n_bootstrap=int(self.timing_bootstrap)
        ).fit(hours, wd, acc, yt - lin_train["account_median"])
        tau_t = self.timing_.predict(hours, wd, acc)
        tau_c = self.timing_.predict(*self._clock(Xc))
        self.boosted_ = QuantileForecaster(**self._quantile_params(self.n_estimators_)).fit(
            Xt[:, cols], yt - tau_t, Xc[:, cols], yc - tau_c, feature_names=self.boosted_columns_
        )
        self.feature_names_ = tuple(names)
        self.n_features_in_ = len(names)
        self.levels_ = self.boosted_.levels_
        # Means over the training rows: the baseline of each linear part in
        # the explanation.
        self.means_ = {c: float(np.mean(v)) for c, v in lin_train.items()}

        # 5. CQR on the calibration block, around the blend.
        #    Scores stay in time order; their weights favour the latest rows.
        self.cal_weights_ = recency_weights(
            cal_times if cal_times is not None else np.arange(len(yc), dtype=float),
            half_life=self.recency_half_life,
        )
        self.band_shape_: dict[int, tuple[float, float, float]] = {}
        med_c, lows, highs = self._blend_and_bands(Xc)
        for i in sorted(lows):
            alpha = 1.0 - float(self.levels_[i])

            # The shape is chosen on the earlier half of the block only, so
            # the later half's scores did not pick it (less selection effect).
            h = len(yc) // 2

            def quantile(sc: np.ndarray, a: float = alpha, h: int = h) -> float:
                return weighted_conformal_quantile(sc, self.cal_weights_[:h], alpha=a)

            self.band_shape_[i] = choose_shrink(
                yc[:h], med_c[:h], lows[i][:h] - med_c[:h], highs[i][:h] - med_c[:h], quantile=quantile
            )
        _, lows, highs = self._blend_and_bands(Xc)
        self.cal_scores_ = tuple(cqr_scores(yc, lows[i], highs[i]) for i in sorted(lows))
        self.n_train_, self.n_cal_ = int(n), int(Xc.shape[0])
        return self

    # -- prediction --------------------------------------------------------

    def _check_fitted(self) -> None:
        check_is_fitted(self, "boosted_")

    def candidates(self, X: ArrayLike) -> dict[str, np.ndarray]:
        """Each candidate's point forecast, and ``timing``, the timing effect."""
        self._check_fitted()
        Xp = as_matrix("X", X, self.n_features_in_)
        tau = self.timing_.predict(*self._clock(Xp))
        out = {
            "boosted": _booster_median(self.boosted_, Xp[:, self._cols]) + tau,
            **self._linear(Xp, self.history_median_),
        }
        out["timing"] = tau
        return out

    def _with_timing(self, cands: dict[str, np.ndarray], tau: np.ndarray) -> dict[str, np.ndarray]:
        """The candidates as blended: the linear ones plus the timing effect
        when every candidate carries it (``timing_in_all_``)."""
        if not getattr(self, "timing_in_all_", False):
            return cands
        return {c: (v if c == "boosted" else v + tau) for c, v in cands.items() if c in CANDIDATES}

    @property
    def timing_scale_(self) -> float:
        """How much of the timing effect the served median carries."""
        carried = 1.0 if getattr(self, "timing_in_all_", False) else self.weights_["boosted"]
        return float(self.timing_weight_ + carried)

    def _blend(
        self,
        cands: dict[str, np.ndarray],
        weights: dict[str, float] | None = None,
        in_all: bool | None = None,
    ) -> np.ndarray:
        if weights is None:
            weights, scale = self.weights_, self.timing_scale_
        else:
            scale = self.timing_weight_ + (1.0 if in_all else weights["boosted"])
        med = sum(weights.get(c, 0.0) * cands[c] for c in CANDIDATES)
        return np.asarray(med + (scale - weights["boosted"]) * cands["timing"], dtype=float)

    def median_without_learned(self, X: ArrayLike) -> np.ndarray:
        """The blended median the stack block would have served without the
        learned neighbours (what the backtest compares the served one with)."""
        cands = self.candidates(X)
        w = getattr(self, "weights_without_learned_", self.weights_)
        return self._blend(cands, w, getattr(self, "timing_in_all_without_learned_", False))

    def _blend_and_bands(
        self, X: np.ndarray, *, level: int | None = None
    ) -> tuple[np.ndarray, dict[int, np.ndarray], dict[int, np.ndarray]]:
        """The blend and each level's raw band by level index (only ``level``
        when given: a forecast needs one level, not all of them)."""
        cands = self.candidates(X)
        med = self._blend(cands)
        Xb = X[:, self._cols]
        lows, highs = {}, {}
        # The boosted quantiles' offsets from their own median, around the blend.
        raw_med = cands["boosted"] - cands["timing"]
        models = self.boosted_
        shape = getattr(self, "band_shape_", {})
        for i in range(len(models.lower_models_)) if level is None else (level,):
            off_lo = predict_booster(models.lower_models_[i], Xb) - raw_med
            off_hi = predict_booster(models.upper_models_[i], Xb) - raw_med
            if i in shape:  # the offsets' spread kept (models.band_shape)
                lam, m_lo, m_hi = shape[i]
                off_lo, off_hi = shaped(m_lo, off_lo, lam), shaped(m_hi, off_hi, lam)
            lows[i], highs[i] = med + off_lo, med + off_hi
        return med, lows, highs

    def level_for(self, coverage: float) -> int:
        self._check_fitted()
        return nearest_level(self.levels_, coverage)

    def calibration_scores(self, coverage: float) -> np.ndarray:
        """The CQR scores of the calibration block at the level nearest
        ``coverage``, sorted (what adaptive conformal inference moves along)."""
        i = self.level_for(coverage)
        key = ("sorted", i, 0.0)
        hit = self._cache().get(key)
        if hit is None:
            hit = self._cache()[key] = np.sort(np.asarray(self.cal_scores_[i], dtype=float))
        return np.asarray(hit)

    def _cache(self) -> dict[tuple[str, int, float], Any]:
        # Worked out from the fitted state and kept: sorting a large
        # calibration block on every forecast cost more than the forecast.
        # A plain attribute (not learned state), made on first use.
        cache: dict[tuple[str, int, float], Any] | None = self.__dict__.get("_derived")
        if cache is None:
            cache = self.__dict__["_derived"] = {}
        return cache

    def _band_quantile(self, i: int, coverage: float) -> float:
        """The weighted CQR quantile of level ``i`` at ``coverage`` (cached)."""
        key = ("q", i, float(coverage))
        hit = self._cache().get(key)
        if hit is None:
            hit = self._cache()[key] = weighted_conformal_quantile(
                self.cal_scores_[i], self.cal_weights_, alpha=1.0 - float(coverage)
            )
        return float(hit)

    def predict(
        self, X: ArrayLike, *, coverage: float = DEFAULT_COVERAGE
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``(lo, median, hi)``: the blend and its CQR band at ``coverage``."""
        i = self.level_for(coverage)
        Xp = as_matrix("X", X, self.n_features_in_)
        med, lows, highs = self._blend_and_bands(Xp, level=i)
        q = self._band_quantile(i, coverage)
        lo, hi = lows[i] - q, highs[i] + q
        return ordered_band(lo, med, hi)

    def contributions(self, X: ArrayLike) -> np.ndarray:
        """Per-feature contributions to the blended median, shape
        (n, n_features + 1), last column the expected value; rows sum to
        the blend. The boosted part is its TreeSHAP values times its weight;
        each linear candidate adds ``weight * (value - mean)`` to the column
        it reads; the timing effect goes to ``hour_sin``."""
        self._check_fitted()
        Xp = as_matrix("X", X, self.n_features_in_)
        out = np.zeros((Xp.shape[0], self.n_features_in_ + 1))
        wb = self.weights_["boosted"]
        shap = self.boosted_.contributions(Xp[:, self._cols])
        out[:, self._cols] += wb * shap[:, :-1]
        expected = wb * shap[:, -1]
        lin = self._linear(Xp, self.history_median_)
        for cand, src in _SOURCE.items():
            wc = self.weights_.get(cand, 0.0)
            if wc == 0.0 or src not in self._index:  # not in use, or a model older than it
                continue
            out[:, self._index[src]] += wc * (lin[cand] - self.means_[cand])
            expected = expected + wc * self.means_[cand]
        expected = expected + self.weights_["history_median"] * self.history_median_
        tau = self.timing_.predict(*self._clock(Xp))
        out[:, self._index["hour_sin"]] += self.timing_scale_ * tau
        out[:, -1] = expected
        return out

    def timing_part(self, X: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
        """The timing component's part of the median, and the same part from
        each bootstrap refit (n_bootstrap, rows)."""
        self._check_fitted()
        Xp = as_matrix("X", X, self.n_features_in_)
        clock = self._clock(Xp)
        scale = self.timing_scale_
        return scale * self.timing_.predict(*clock), scale * self.timing_.draws(*clock)

    def summary(self) -> dict[str, Any]:
        """What was learnt, for the training report."""
        self._check_fitted()
        return {
            "weights": {c: round(w, 4) for c, w in self.weights_.items()},
            "timing_weight": round(self.timing_weight_, 4),
            "timing_in_every_candidate": bool(getattr(self, "timing_in_all_", False)),
            "timing_scale": round(self.timing_scale_, 4),
            "timing_penalty": self.timing_.alpha_,
            "boosted_rounds": self.n_estimators_,
            "boosted_columns": list(self.boosted_columns_),
            "left_out_of_boosted": list(self.dropped_),
            "time_carries_nothing": getattr(self, "time_carries_nothing_", None),
            "stack_block_mae_log": {c: round(v, 4) for c, v in self.stack_scores_.items()},
            "blend_loss": "absolute",
            "band_shrink": {f"{self.levels_[i]:g}": round(v[0], 2) for i, v in self.band_shape_.items()},
            "blend_kind": getattr(self, "blend_kind_", "blend"),
            "fallback_to": getattr(self, "fallback_to_", None),
            "learned_neighbours_in_use": bool(getattr(self, "learned_in_use_", False)),
            "learned_neighbours_check": getattr(self, "learned_check_", {}),
        }

    # -- persistence -------------------------------------------------------

    def save(self, directory: str | os.PathLike[str]) -> Path:
        self._check_fitted()
        root = Path(directory)
        root.mkdir(parents=True, exist_ok=True)
        self.boosted_.save(root / "boosted")
        config = {
            "format_version": FORMAT_VERSION,
            "kind": "StackedForecaster",
            "params": self.get_params(),
            "feature_names": list(self.feature_names_),
            "boosted_columns": list(self.boosted_columns_),
            "dropped": list(self.dropped_),
            "n_estimators": self.n_estimators_,
            "weights": self.weights_,
            "timing_weight": self.timing_weight_,
            "timing_in_all": bool(getattr(self, "timing_in_all_", False)),
            "stack_scores": self.stack_scores_,
            "blend_kind": getattr(self, "blend_kind_", "blend"),
            "fallback_to": getattr(self, "fallback_to_", None),
            "learned_in_use": bool(self.learned_in_use_),
            "learned_check": self.learned_check_,
            "weights_without_learned": self.weights_without_learned_,
            "timing_in_all_without_learned": bool(self.timing_in_all_without_learned_),
            "history_median": self.history_median_,
            "means": self.means_,
            "timing": self.timing_.to_config(),
            "scores": [[float(x) for x in sc] for sc in self.cal_scores_],
            "score_weights": [float(x) for x in self.cal_weights_],
            "band_shape": {str(i): list(v) for i, v in self.band_shape_.items()},
            "n_train": self.n_train_,
            "n_cal": self.n_cal_,
        }
        write_config(root, config, CONFIG_FILE, indent=None)
        return root

    @classmethod
    def load(cls, directory: str | os.PathLike[str]) -> Self:
        root = Path(directory)
        path = root / CONFIG_FILE
        if not path.is_file():
            raise NotFound(f"no saved model at {root}", where="StackedForecaster.load")
        try:
            cfg = json.loads(path.read_text())
            if cfg.get("format_version") != FORMAT_VERSION or cfg.get("kind") != cls.__name__:
                raise StoreError("unsupported model format", where=str(path))
            params = dict(cfg["params"])
            params["levels"] = tuple(params["levels"])
            m = cls(**params)
            m.boosted_ = QuantileForecaster.load(root / "boosted")
            m.feature_names_ = tuple(cfg["feature_names"])
            m.n_features_in_ = len(m.feature_names_)
            m._index = {nm: i for i, nm in enumerate(m.feature_names_)}
            m.boosted_columns_ = tuple(cfg["boosted_columns"])
            m._cols = [m._index[nm] for nm in m.boosted_columns_]
            m.dropped_ = tuple(cfg["dropped"])
            m.n_estimators_ = int(cfg["n_estimators"])
            m.weights_ = dict.fromkeys(CANDIDATES, 0.0) | {k: float(v) for k, v in cfg["weights"].items()}
            m.timing_weight_ = float(cfg["timing_weight"])
            m.timing_in_all_ = bool(cfg.get("timing_in_all", False))  # older models: boosted only
            m.stack_scores_ = dict(cfg["stack_scores"])
            m.blend_kind_, m.fallback_to_ = cfg.get("blend_kind", "blend"), cfg.get("fallback_to")
            # Older models had no learned neighbours: their blend is the one without.
            m.learned_in_use_ = bool(cfg.get("learned_in_use", False))
            m.learned_check_ = dict(cfg.get("learned_check", {}))
            m.weights_without_learned_ = dict.fromkeys(CANDIDATES, 0.0) | {
                k: float(v) for k, v in cfg.get("weights_without_learned", cfg["weights"]).items()
            }
            m.timing_in_all_without_learned_ = bool(
                cfg.get("timing_in_all_without_learned", cfg.get("timing_in_all", False))
            )
            m.history_median_ = float(cfg["history_median"])
            m.means_ = {k: float(v) for k, v in cfg["means"].items()}
            m.timing_ = TimingEffect.from_config(cfg["timing"])
            m.levels_ = m.boosted_.levels_
            m.cal_scores_ = tuple(np.asarray(sc, dtype=float) for sc in cfg["scores"])
            m.cal_weights_ = np.asarray(cfg["score_weights"], dtype=float)
            # Older models kept the trees' band as it was (no entry).
            m.band_shape_ = {
                int(i): (float(v[0]), float(v[1]), float(v[2])) for i, v in cfg.get("band_shape", {}).items()
            }
            m.n_train_, m.n_cal_ = int(cfg["n_train"]), int(cfg["n_cal"])
        except StoreError:
            raise
        except (OSError, ValueError, KeyError, TypeError, InputError) as exc:
            raise StoreError(f"unreadable model: {exc}", where=str(root)) from exc
        return m


def _booster_median(model: QuantileForecaster, X: np.ndarray) -> np.ndarray:
    return predict_booster(model.median_model_, X)
