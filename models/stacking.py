"""The served forecaster: candidate forecasts blended in time order, with
an additive timing component, and CQR bands on the blend.

Rows arrive sorted by time and are cut into three blocks:

    fit (first 75% of training)  ->  stack (last 25%)  ->  calibration

- Candidates, each a point forecast of the log metric:
  ``boosted`` (LightGBM, rounds chosen by early stopping on the stack
  block, then refitted on fit + stack), ``text_ridge`` (ridge on the
  embedding vectors, predicted out of sample in time order), and the simple
  forecasters: ``account_median`` (trailing median), ``precedents_median``
  (median of the 20 nearest earlier posts), ``history_median``.
- A timing effect (``models.timing``): fitted first, inside ``boosted``
  (the trees learn what it leaves). With ``blend_timing`` it is also offered
  to the blend as an additive column with a non-negative weight (off by
  default: on the demo it only added noise to the weights).
- Blend weights: non-negative, summing to one, least squares on the stack
  block from models fitted on the fit block only (``models.blend``).
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

import lightgbm as lgb
import numpy as np
from numpy.typing import ArrayLike
from threadpoolctl import threadpool_limits  # type: ignore[import-untyped]

from models import features as F
from models.blend import simplex_weights
from models.calibration import cqr_scores
from models.errors import InputError, NotFittedError, NotFound, StoreError
from models.metrics import DEFAULT_COVERAGE, MAX_COVERAGE, MIN_COVERAGE, TRAINED_LEVELS
from models.regressor import QuantileForecaster, _matrix, _target
from models.textmodel import RidgeText
from models.timing import TimingEffect, best_hour_share, hour_from_cyclic

#: Columns added after ``models.features.FEATURE_NAMES`` (see ``extra_columns``).
EXTRA_FEATURES: tuple[str, ...] = ("text_ridge", "account_code")
ALL_FEATURES: tuple[str, ...] = F.FEATURE_NAMES + EXTRA_FEATURES
#: Explanation groups of the extra columns (the text model reads what past
#: posts' words did, like the precedents do).
EXTRA_GROUPS: dict[str, str] = {"text_ridge": "precedents", "account_code": "account baseline"}
ALL_GROUPS: dict[str, str] = {**F.FEATURE_GROUPS, **EXTRA_GROUPS}

CANDIDATES: tuple[str, ...] = (
    "boosted",
    "text_ridge",
    "account_median",
    "precedents_median",
    "history_median",
)
SIMPLE: tuple[str, ...] = ("account_median", "precedents_median", "history_median")
#: Candidate -> the feature column it reads (linear candidates).
_SOURCE = {"text_ridge": "text_ridge", "account_median": "baseline", "precedents_median": "team_median"}
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


def _duplicates(X: np.ndarray) -> set[int]:
    """Columns equal (NaN included) to an earlier column on these rows."""
    out: set[int] = set()
    for j in range(X.shape[1]):
        for i in range(j):
            if i not in out and np.array_equal(X[:, i], X[:, j], equal_nan=True):
                out.add(j)
                break
    return out


class StackedForecaster:
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

    def get_params(self) -> dict[str, Any]:
        return {
            "levels": [float(c) for c in self.levels],
            "max_estimators": int(self.max_estimators),
            "early_stopping_rounds": int(self.early_stopping_rounds),
            "learning_rate": float(self.learning_rate),
            "num_leaves": int(self.num_leaves),
            "min_child_samples": int(self.min_child_samples),
            "stack_fraction": float(self.stack_fraction),
            "boosted_timing": bool(self.boosted_timing),
            "blend_timing": bool(self.blend_timing),
            "recency_half_life": (None if self.recency_half_life is None else float(self.recency_half_life)),
            "timing_bootstrap": int(self.timing_bootstrap),
            "random_state": int(self.random_state),
            "num_threads": int(self.num_threads),
        }

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
        Xt = _matrix("X_train", X_train, len(names))
        yt = _target("y_train", y_train, Xt.shape[0])
        Xc = _matrix("X_cal", X_cal, len(names))
        yc = _target("y_cal", y_cal, Xc.shape[0])
        if len(set(names)) != len(names):
            raise InputError("feature_names must be distinct", field="feature_names")
        if not 0.05 <= float(self.stack_fraction) <= 0.5:
            raise InputError("stack_fraction must lie in [0.05, 0.5]", field="stack_fraction")
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
        skip = {"account_code"}
        if not self.boosted_timing or self.time_carries_nothing_:
            skip |= set(F.TIMING_FEATURES)
        cols = [i for i, nm in enumerate(names) if nm not in skip]
        dup = _duplicates(Xt[:, cols])
        self.dropped_ = tuple(names[cols[j]] for j in sorted(dup)) + tuple(nm for nm in names if nm in skip)
        cols = [c for j, c in enumerate(cols) if j not in dup]
        self.boosted_columns_ = tuple(names[c] for c in cols)
        self._cols = cols
        # 2. Rounds by early stopping on the stack block (time-ordered validation).
        base = QuantileForecaster(**self._quantile_params(1))._booster_params(0.5)
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
        Fm = np.column_stack([cands[c] for c in CANDIDATES])
        w, g = simplex_weights(Fm, yt[stack_idx], tau_stack[:, None] if self.blend_timing else None)
        g = g if self.blend_timing else np.zeros(1)
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
        _, lows, highs = self._raw(Xc)
        #    Scores stay in time order; their weights favour the latest rows.
        self.cal_scores_ = tuple(cqr_scores(yc, lows[i], highs[i]) for i in sorted(lows))
        self.cal_weights_ = recency_weights(
            cal_times if cal_times is not None else np.arange(len(yc), dtype=float),
            half_life=self.recency_half_life,
        )
        self.n_train_, self.n_cal_ = int(n), int(Xc.shape[0])
        return self

    # -- prediction --------------------------------------------------------

    def _check_fitted(self) -> None:
        if not hasattr(self, "boosted_"):
            raise NotFittedError(
                "StackedForecaster is not fitted yet; call fit(...) or load(...)", where="StackedForecaster"
            )

    def candidates(self, X: ArrayLike) -> dict[str, np.ndarray]:
        """Each candidate's point forecast, and ``timing``, the timing effect."""
        self._check_fitted()
        Xp = _matrix("X", X, self.n_features_in_)
        tau = self.timing_.predict(*self._clock(Xp))
        out = {
            "boosted": _booster_median(self.boosted_, Xp[:, self._cols]) + tau,
            **self._linear(Xp, self.history_median_),
        }
        out["timing"] = tau
        return out

    def _blend(self, cands: dict[str, np.ndarray]) -> np.ndarray:
        med = sum(self.weights_[c] * cands[c] for c in CANDIDATES)
        return np.asarray(med + self.timing_weight_ * cands["timing"], dtype=float)

    def _raw(
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
        for i in range(len(models.lower_models_)) if level is None else (level,):
            lows[i] = med + _predict(models.lower_models_[i], Xb) - raw_med
            highs[i] = med + _predict(models.upper_models_[i], Xb) - raw_med
        return med, lows, highs

    def level_for(self, coverage: float) -> int:
        self._check_fitted()
        coverage = float(coverage)
        if not MIN_COVERAGE <= coverage <= MAX_COVERAGE:
            raise InputError(
                f"coverage must lie in [{MIN_COVERAGE}, {MAX_COVERAGE}], got {coverage}",
                field="coverage",
                value=coverage,
            )
        gaps = [(abs(c - coverage), -c) for c in self.levels_]
        return min(range(len(gaps)), key=gaps.__getitem__)

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
        Xp = _matrix("X", X, self.n_features_in_)
        med, lows, highs = self._raw(Xp, level=i)
        q = self._band_quantile(i, coverage)
        lo, hi = lows[i] - q, highs[i] + q
        # Sorting only widens [lo, hi] to include the median (guarantee kept).
        ordered = np.sort(np.stack([lo, med, hi], axis=1), axis=1)
        return ordered[:, 0].copy(), ordered[:, 1].copy(), ordered[:, 2].copy()

    def contributions(self, X: ArrayLike) -> np.ndarray:
        """Per-feature contributions to the blended median, shape
        (n, n_features + 1), last column the expected value; rows sum to
        the blend. The boosted part is its TreeSHAP values times its weight;
        each linear candidate adds ``weight * (value - mean)`` to the column
        it reads; the timing effect goes to ``hour_sin``."""
        self._check_fitted()
        Xp = _matrix("X", X, self.n_features_in_)
        out = np.zeros((Xp.shape[0], self.n_features_in_ + 1))
        wb = self.weights_["boosted"]
        shap = self.boosted_.contributions(Xp[:, self._cols])
        out[:, self._cols] += wb * shap[:, :-1]
        expected = wb * shap[:, -1]
        lin = self._linear(Xp, self.history_median_)
        for cand, src in _SOURCE.items():
            wc = self.weights_[cand]
            out[:, self._index[src]] += wc * (lin[cand] - self.means_[cand])
            expected = expected + wc * self.means_[cand]
        expected = expected + self.weights_["history_median"] * self.history_median_
        tau = self.timing_.predict(*self._clock(Xp))
        out[:, self._index["hour_sin"]] += (self.timing_weight_ + wb) * tau
        out[:, -1] = expected
        return out

    def timing_part(self, X: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
        """The timing component's part of the median, and the same part from
        each bootstrap refit (n_bootstrap, rows)."""
        self._check_fitted()
        Xp = _matrix("X", X, self.n_features_in_)
        clock = self._clock(Xp)
        scale = self.timing_weight_ + self.weights_["boosted"]
        return scale * self.timing_.predict(*clock), scale * self.timing_.draws(*clock)

    def summary(self) -> dict[str, Any]:
        """What was learnt, for the training report."""
        self._check_fitted()
        return {
            "weights": {c: round(w, 4) for c, w in self.weights_.items()},
            "timing_weight": round(self.timing_weight_, 4),
            "timing_penalty": self.timing_.alpha_,
            "boosted_rounds": self.n_estimators_,
            "boosted_columns": list(self.boosted_columns_),
            "left_out_of_boosted": list(self.dropped_),
            "time_carries_nothing": getattr(self, "time_carries_nothing_", None),
            "stack_block_mae_log": {c: round(v, 4) for c, v in self.stack_scores_.items()},
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
            "stack_scores": self.stack_scores_,
            "history_median": self.history_median_,
            "means": self.means_,
            "timing": self.timing_.to_config(),
            "scores": [[float(x) for x in sc] for sc in self.cal_scores_],
            "score_weights": [float(x) for x in self.cal_weights_],
            "n_train": self.n_train_,
            "n_cal": self.n_cal_,
        }
        tmp = root / (CONFIG_FILE + ".tmp")
        tmp.write_text(json.dumps(config))
        tmp.replace(root / CONFIG_FILE)
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
            m.weights_ = {k: float(v) for k, v in cfg["weights"].items()}
            m.timing_weight_ = float(cfg["timing_weight"])
            m.stack_scores_ = dict(cfg["stack_scores"])
            m.history_median_ = float(cfg["history_median"])
            m.means_ = {k: float(v) for k, v in cfg["means"].items()}
            m.timing_ = TimingEffect.from_config(cfg["timing"])
            m.levels_ = m.boosted_.levels_
            m.cal_scores_ = tuple(np.asarray(sc, dtype=float) for sc in cfg["scores"])
            m.cal_weights_ = np.asarray(cfg["score_weights"], dtype=float)
            m.n_train_, m.n_cal_ = int(cfg["n_train"]), int(cfg["n_cal"])
        except StoreError:
            raise
        except (OSError, ValueError, KeyError, TypeError, InputError) as exc:
            raise StoreError(f"unreadable model: {exc}", where=str(root)) from exc
        return m


def _predict(booster: lgb.Booster, X: np.ndarray) -> np.ndarray:
    if X.shape[0] == 0:
        return np.empty(0)
    return np.asarray(booster.predict(X, num_threads=1 if X.shape[0] < 1000 else 0), dtype=float)


def _booster_median(model: QuantileForecaster, X: np.ndarray) -> np.ndarray:
    return _predict(model.median_model_, X)


def load_forecaster(directory: str | os.PathLike[str]) -> QuantileForecaster | StackedForecaster:
    """Either kind of saved forecaster, by the kind its config names."""
    path = Path(directory) / CONFIG_FILE
    try:
        kind = json.loads(path.read_text()).get("kind")
    except (OSError, ValueError):
        kind = None
    if kind == "StackedForecaster":
        return StackedForecaster.load(directory)
    return QuantileForecaster.load(directory)


def best_hour_confidence(
    model: QuantileForecaster | StackedForecaster,
    *,
    local_hours: Sequence[float],
    weekdays: Sequence[int],
    account: int,
    medians: Sequence[float],
) -> float | None:
    """Share of the timing component's bootstrap refits in which the slot
    with the highest served median (log) stays highest; None for a model
    without a timing component (older versions)."""
    if not isinstance(model, StackedForecaster) or len(medians) == 0:
        return None
    n = len(medians)
    clock = (
        np.asarray(local_hours, dtype=float),
        np.asarray(weekdays, dtype=float),
        np.full(n, float(account)),
    )
    scale = model.timing_weight_ + model.weights_["boosted"]
    effect = scale * model.timing_.predict(*clock)
    draws = model.timing_.draws(*clock)
    if draws.shape[0] == 0:
        return None
    return round(best_hour_share(np.asarray(medians, dtype=float), effect, draws, scale=scale), 3)


def recency_weights(times: ArrayLike, *, half_life: float | None) -> np.ndarray:
    """Weights of calibration rows (oldest first): halving every
    ``half_life`` of the block's rows back from the newest, by position;
    rows posted at the same time share their mean position. All ones when
    ``half_life`` is None (plain split conformal)."""
    t = np.asarray(times, dtype=float)
    n = len(t)
    if half_life is None or n == 0:
        return np.ones(n)
    # Average position of each distinct time (ties share it).
    _, inverse, counts = np.unique(t, return_inverse=True, return_counts=True)
    starts = np.r_[0, np.cumsum(counts)[:-1]]
    pos = (starts + (counts - 1) / 2.0)[inverse]
    return np.asarray(0.5 ** ((n - 1 - pos) / (float(half_life) * n)), dtype=float)


def weighted_conformal_quantile(scores: ArrayLike, weights: ArrayLike, *, alpha: float) -> float:
    """The smallest score ``q`` with ``sum(w_i [s_i <= q]) / (sum(w) + w_test)
    >= 1 - alpha``, the test point weighing as much as the newest row
    (``max(w)``); infinite when no score reaches it. With equal weights this
    is the ``ceil((n + 1)(1 - alpha))``-th smallest score of split conformal."""
    s = np.asarray(scores, dtype=float)
    w = np.asarray(weights, dtype=float)
    if s.shape != w.shape or s.ndim != 1 or s.size == 0:
        raise InputError("scores and weights must be 1-D of one non-zero length", field="scores")
    if not 0.0 < float(alpha) < 1.0:
        raise InputError(f"alpha must lie in (0, 1), got {alpha}", field="alpha")
    order = np.argsort(s, kind="stable")
    cum = np.cumsum(w[order]) / (w.sum() + w.max())
    k = int(np.searchsorted(cum, 1.0 - float(alpha) - 1e-12, side="left"))
    return float(s[order][k]) if k < s.size else math.inf
