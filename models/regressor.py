"""The reach forecaster: LightGBM quantile models calibrated by CQR.

For each nominal coverage level ``c`` in a small grid we train a lower
(``(1 - c)/2``) and an upper (``1 - (1 - c)/2``) quantile booster, plus one
median booster, all on the training block. CQR scores of each pair on a
separate calibration block then turn any requested coverage into a
finite-sample valid band (see :mod:`models.calibration`). The grid exists
only to make bands sharp: the pair nearest the request is closest to the
right shape, and the conformal correction fixes its level.

Targets are taken as given; callers model counts on a ``log1p`` scale.
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

from models.calibration import CQRCalibrator
from models.errors import InputError, NotFittedError, NotFound, StoreError
from models.metrics import DEFAULT_COVERAGE, MAX_COVERAGE, MIN_COVERAGE, TRAINED_LEVELS

# Coverage levels ``predict`` accepts are models.metrics' MIN_COVERAGE to MAX_COVERAGE:
# below 0.5 a band is not useful; above 0.95 the calibration blocks we see are too
# small to be sharp.

#: Version of the on-disk layout written by ``save``.
FORMAT_VERSION = 1
CONFIG_FILE = "config.json"


# LightGBM rejects some characters in feature names and rewrites others,
# so boosters see neutral column names; ours stay exact in config.json.
def _internal_names(n: int) -> list[str]:
    return [f"f{i}" for i in range(n)]


def _matrix(name: str, X: Any, n_features: int | None = None) -> np.ndarray:
    try:
        arr = np.asarray(X, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name} must be numeric: {exc}", field=name) from None
    if arr.ndim != 2:
        raise InputError(f"{name} must be 2-D (rows x features), got shape {arr.shape}", field=name)
    if n_features is not None and arr.shape[1] != n_features:
        raise InputError(f"{name} has {arr.shape[1]} features, the model expects {n_features}", field=name)
    # NaN is a missing feature (no baseline yet, no neighbours), which
    # LightGBM routes natively; infinities are bugs upstream.
    if np.isinf(arr).any():
        raise InputError(f"{name} contains infinite values", field=name)
    return arr


def _target(name: str, y: Any, n_rows: int) -> np.ndarray:
    try:
        arr = np.asarray(y, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name} must be numeric: {exc}", field=name) from None
    if arr.ndim != 1 or arr.shape[0] != n_rows:
        raise InputError(f"{name} must be 1-D with {n_rows} values, got shape {arr.shape}", field=name)
    if not np.isfinite(arr).all():
        raise InputError(f"{name} contains NaN or infinite values", field=name)
    return arr


def _raw(booster: lgb.Booster, X: np.ndarray, *, contrib: bool = False) -> np.ndarray:
    # LightGBM divides by the row count, so an empty batch is answered here.
    if X.shape[0] == 0:
        return np.empty((0, X.shape[1] + 1) if contrib else 0)
    # A forecast predicts a few rows: OpenMP threads cost more than they save
    # there, and fight the service's other work for the cores.
    threads = 1 if X.shape[0] < 1000 else 0
    return np.asarray(booster.predict(X, pred_contrib=contrib, num_threads=threads), dtype=float)


class QuantileForecaster:
    """Calibrated prediction bands from LightGBM quantile boosters."""

    def __init__(
        self,
        *,
        levels: Sequence[float] = TRAINED_LEVELS,
        n_estimators: int = 300,
        learning_rate: float = 0.05,
        num_leaves: int = 15,
        min_child_samples: int = 20,
        random_state: int = 0,
        num_threads: int = 2,
    ) -> None:
        self.levels = levels
        self.n_estimators = n_estimators
        self.learning_rate = learning_rate
        self.num_leaves = num_leaves
        self.min_child_samples = min_child_samples
        self.random_state = random_state
        self.num_threads = num_threads

    def get_params(self) -> dict[str, Any]:
        return {
            "levels": [float(c) for c in self.levels],
            "n_estimators": int(self.n_estimators),
            "learning_rate": float(self.learning_rate),
            "num_leaves": int(self.num_leaves),
            "min_child_samples": int(self.min_child_samples),
            "random_state": int(self.random_state),
            "num_threads": int(self.num_threads),
        }

    # -- fitting -----------------------------------------------------------

    def _checked_levels(self) -> tuple[float, ...]:
        levels = tuple(sorted(float(c) for c in self.levels))
        if not levels or len(set(levels)) != len(levels):
            raise InputError("levels must be a non-empty set of distinct values", field="levels")
        if levels[0] <= 0.0 or levels[-1] >= 1.0:
            raise InputError("levels must lie strictly between 0 and 1", field="levels")
        return levels

    def _booster_params(self, alpha: float) -> dict[str, Any]:
        return {
            "objective": "quantile",
            "alpha": alpha,
            "learning_rate": float(self.learning_rate),
            "num_leaves": int(self.num_leaves),
            "min_data_in_leaf": int(self.min_child_samples),
            "seed": int(self.random_state),
            # Same data and params give the same trees on any thread count.
            "deterministic": True,
            "force_row_wise": True,
            "num_threads": int(self.num_threads),
            "verbose": -1,
        }

    def min_calibration_rows(self) -> int:
        """Rows a calibration block needs for a finite band at the widest
        coverage ``predict`` can be asked for: ``ceil((n+1)c) <= n``."""
        top = max(MAX_COVERAGE, max(float(c) for c in self.levels))
        return math.ceil(top / (1.0 - top) - 1e-9)

    def fit(
        self,
        X_train: ArrayLike,
        y_train: ArrayLike,
        X_cal: ArrayLike,
        y_cal: ArrayLike,
        *,
        feature_names: Sequence[str] | None = None,
    ) -> Self:
        levels = self._checked_levels()
        if int(self.n_estimators) < 1:
            raise InputError("n_estimators must be at least 1", field="n_estimators")
        if feature_names is None and hasattr(X_train, "columns"):
            feature_names = [str(c) for c in X_train.columns]
        Xt = _matrix("X_train", X_train)
        n_features = Xt.shape[1]
        if n_features == 0:
            raise InputError("X_train has no feature columns", field="X_train")
        yt = _target("y_train", y_train, Xt.shape[0])
        Xc = _matrix("X_cal", X_cal, n_features)
        yc = _target("y_cal", y_cal, Xc.shape[0])

        # Fewer rows than two leaves' minimum leaves no split to learn.
        need_train = 2 * int(self.min_child_samples)
        if Xt.shape[0] < need_train:
            raise InputError(
                f"{Xt.shape[0]} training rows; need at least {need_train} (2 x min_child_samples)",
                field="X_train",
            )
        need_cal = self.min_calibration_rows()
        if Xc.shape[0] < need_cal:
            raise InputError(
                f"{Xc.shape[0]} calibration rows; need at least {need_cal} "
                f"for a finite band at coverage {max(MAX_COVERAGE, levels[-1])}",
                field="X_cal",
            )
        names = _internal_names(n_features) if feature_names is None else [str(n) for n in feature_names]
        if len(names) != n_features or len(set(names)) != n_features:
            raise InputError(
                f"feature_names must be {n_features} distinct names, got {len(names)}",
                field="feature_names",
            )

        # One binned Dataset serves every booster: only alpha differs.
        base = self._booster_params(0.5)
        data = lgb.Dataset(Xt, yt, feature_name=_internal_names(n_features), params=base, free_raw_data=False)

        def train(alpha: float) -> lgb.Booster:
            return lgb.train(self._booster_params(alpha), data, num_boost_round=int(self.n_estimators))

        self.median_model_ = train(0.5)
        lowers: list[lgb.Booster] = []
        uppers: list[lgb.Booster] = []
        calibrators: list[CQRCalibrator] = []
        for c in levels:
            lo_model, hi_model = train((1.0 - c) / 2.0), train(1.0 - (1.0 - c) / 2.0)
            cal = CQRCalibrator(alpha=1.0 - c).fit(yc, lo_model.predict(Xc), hi_model.predict(Xc))
            lowers.append(lo_model)
            uppers.append(hi_model)
            calibrators.append(cal)
        self.levels_ = levels
        self.lower_models_ = tuple(lowers)
        self.upper_models_ = tuple(uppers)
        self.calibrators_ = tuple(calibrators)
        self.feature_names_ = tuple(names)
        self.n_features_in_ = n_features
        self.n_train_ = int(Xt.shape[0])
        self.n_cal_ = int(Xc.shape[0])
        return self

    # -- prediction --------------------------------------------------------

    def _check_fitted(self) -> None:
        if not hasattr(self, "median_model_"):
            raise NotFittedError(
                "QuantileForecaster is not fitted yet; call fit(...) or load(directory) first",
                where="QuantileForecaster",
            )

    def calibration_scores(self, coverage: float) -> np.ndarray:
        """The sorted CQR scores at the level nearest ``coverage``."""
        return np.asarray(self.calibrators_[self.level_for(coverage)].scores_, dtype=float)

    def level_for(self, coverage: float) -> int:
        """Index of the grid level nearest ``coverage`` (ties: the wider)."""
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

    def predict(
        self, X: ArrayLike, *, coverage: float = DEFAULT_COVERAGE
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``(lo, median, hi)`` with ``P(lo <= y <= hi) >= coverage`` for a
        row exchangeable with the calibration block."""
        self._check_fitted()
        i = self.level_for(coverage)
        Xp = _matrix("X", X, self.n_features_in_)
        lo, hi = self.calibrators_[i].transform(
            _raw(self.lower_models_[i], Xp),
            _raw(self.upper_models_[i], Xp),
            alpha=1.0 - float(coverage),
        )
        median = _raw(self.median_model_, Xp)
        # Separately trained quantiles can cross. Sorting the three values
        # per row only ever widens [lo, hi] (to include the median), so the
        # conformal guarantee survives and lo <= median <= hi holds.
        ordered = np.sort(np.stack([lo, median, hi], axis=1), axis=1)
        return ordered[:, 0].copy(), ordered[:, 1].copy(), ordered[:, 2].copy()

    def contributions(self, X: ArrayLike) -> np.ndarray:
        """TreeSHAP values of the median model, shape (n, n_features + 1);
        the last column is the expected value, and each row sums to the
        median model's raw prediction."""
        self._check_fitted()
        Xp = _matrix("X", X, self.n_features_in_)
        return _raw(self.median_model_, Xp, contrib=True)

    # -- persistence -------------------------------------------------------

    def save(self, directory: str | os.PathLike[str]) -> Path:
        """Write text booster files and ``config.json`` into ``directory``.

        The config is written last (via a rename), so a directory with a
        config always holds a complete model.
        """
        self._check_fitted()
        root = Path(directory)
        root.mkdir(parents=True, exist_ok=True)
        self.median_model_.save_model(str(root / "median.txt"))
        entries = []
        for i, c in enumerate(self.levels_):
            lower, upper = f"lower_{i}.txt", f"upper_{i}.txt"
            self.lower_models_[i].save_model(str(root / lower))
            self.upper_models_[i].save_model(str(root / upper))
            entries.append(
                {
                    "level": c,
                    "lower_model": lower,
                    "upper_model": upper,
                    # floats go through repr, so the scores round-trip exactly
                    "scores": [float(s) for s in self.calibrators_[i].scores_],
                }
            )
        config = {
            "format_version": FORMAT_VERSION,
            "kind": "QuantileForecaster",
            "params": self.get_params(),
            "feature_names": list(self.feature_names_),
            "n_train": self.n_train_,
            "n_cal": self.n_cal_,
            "median_model": "median.txt",
            "levels": entries,
            "versions": {"lightgbm": lgb.__version__, "numpy": np.__version__},
        }
        tmp = root / (CONFIG_FILE + ".tmp")
        tmp.write_text(json.dumps(config, indent=2), encoding="utf-8")
        tmp.replace(root / CONFIG_FILE)
        return root

    @classmethod
    def load(cls, directory: str | os.PathLike[str]) -> Self:
        root = Path(directory)
        path = root / CONFIG_FILE
        if not path.is_file():
            raise NotFound(
                f"no saved model at {root} (missing {CONFIG_FILE})", where="QuantileForecaster.load"
            )
        try:
            config = json.loads(path.read_text(encoding="utf-8"))
            if config.get("format_version") != FORMAT_VERSION:
                raise StoreError(
                    f"unsupported model format {config.get('format_version')!r}",
                    where=str(path),
                )
            params = dict(config["params"])
            params["levels"] = tuple(params["levels"])
            model = cls(**params)

            def booster(name: str) -> lgb.Booster:
                return lgb.Booster(model_file=str(root / name))

            entries = config["levels"]
            model.median_model_ = booster(config["median_model"])
            model.levels_ = tuple(float(e["level"]) for e in entries)
            model.lower_models_ = tuple(booster(e["lower_model"]) for e in entries)
            model.upper_models_ = tuple(booster(e["upper_model"]) for e in entries)
            model.calibrators_ = tuple(
                CQRCalibrator.from_scores(e["scores"], alpha=1.0 - float(e["level"])) for e in entries
            )
            model.feature_names_ = tuple(config["feature_names"])
            model.n_features_in_ = len(model.feature_names_)
            model.n_train_ = int(config["n_train"])
            model.n_cal_ = int(config["n_cal"])
        except StoreError:
            raise
        except (OSError, ValueError, KeyError, TypeError, lgb.basic.LightGBMError, InputError) as exc:
            raise StoreError(f"unreadable model: {exc}", where=str(root)) from exc
        if model.median_model_.num_feature() != model.n_features_in_:
            raise StoreError("boosters and feature names disagree in width", where=str(root))
        return model
