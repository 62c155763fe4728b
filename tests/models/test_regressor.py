"""QuantileForecaster: fit/predict contract, persistence, TreeSHAP, and CQR
against MAPIE's reference implementation."""

from __future__ import annotations

import itertools
import json
import math
from fractions import Fraction
from pathlib import Path

import lightgbm as lgb
import numpy as np
import pytest
from mapie.regression import ConformalizedQuantileRegressor
from sklearn.base import BaseEstimator, RegressorMixin

from models.calibration import conformal_quantile
from models.errors import InputError, NotFittedError, NotFound
from models.regressor import QuantileForecaster

# One thread: deterministic trees do not depend on the thread count, and a
# second OpenMP thread is much slower when other test runs share the cores.
SMALL = {"n_estimators": 40, "num_threads": 1}


def _data(rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
    X = rng.normal(size=(n, 4))
    noise = rng.normal(size=n) * (0.3 + np.abs(X[:, 2]))
    return X, X[:, 0] + 0.5 * X[:, 1] ** 2 + noise


@pytest.fixture(scope="module")
def blocks() -> dict[str, np.ndarray]:
    rng = np.random.default_rng(0)
    X_train, y_train = _data(rng, 500)
    X_cal, y_cal = _data(rng, 250)
    X_test, y_test = _data(rng, 1000)
    return {
        "X_train": X_train,
        "y_train": y_train,
        "X_cal": X_cal,
        "y_cal": y_cal,
        "X_test": X_test,
        "y_test": y_test,
    }


@pytest.fixture(scope="module")
def model(blocks: dict[str, np.ndarray]) -> QuantileForecaster:
    return QuantileForecaster(**SMALL).fit(
        blocks["X_train"],
        blocks["y_train"],
        blocks["X_cal"],
        blocks["y_cal"],
        feature_names=["followers", "hour", "length", "has link"],
    )


def test_unfitted_raises() -> None:
    m = QuantileForecaster()
    X = np.zeros((3, 4))
    with pytest.raises(NotFittedError, match="not fitted"):
        m.predict(X)
    with pytest.raises(NotFittedError):
        m.contributions(X)
    with pytest.raises(NotFittedError):
        m.save("/nonexistent/never-written")


def test_fitted_state(model: QuantileForecaster) -> None:
    assert model.feature_names_ == ("followers", "hour", "length", "has link")
    assert (model.n_train_, model.n_cal_) == (500, 250)
    assert model.levels_ == (0.5, 0.7, 0.8, 0.9, 0.95)
    assert len(model.lower_models_) == len(model.upper_models_) == len(model.calibrators_) == 5


@pytest.mark.parametrize("cov", [0.5, 0.63, 0.8, 0.87, 0.95])
def test_predict_is_ordered_and_only_widens(
    model: QuantileForecaster, blocks: dict[str, np.ndarray], cov: float
) -> None:
    X = blocks["X_test"]
    lo, med, hi = model.predict(X, coverage=cov)
    assert lo.shape == med.shape == hi.shape == (X.shape[0],)
    assert np.all(lo <= med) and np.all(med <= hi)
    # the sorted band contains the plain CQR band [lo_q - q, hi_q + q]
    i = model.level_for(cov)
    q = conformal_quantile(model.calibrators_[i].scores_, 1 - cov)
    assert np.all(lo <= model.lower_models_[i].predict(X) - q)
    assert np.all(hi >= model.upper_models_[i].predict(X) + q)


def test_wider_coverage_gives_wider_bands(model: QuantileForecaster, blocks: dict[str, np.ndarray]) -> None:
    widths = []
    for c in (0.5, 0.7, 0.8, 0.9, 0.95):
        lo, _, hi = model.predict(blocks["X_test"], coverage=c)
        widths.append(float(np.mean(hi - lo)))
    assert all(a < b for a, b in itertools.pairwise(widths))


@pytest.mark.parametrize("cov", [0.49, 0.96, 0.99, -1.0, math.nan])
def test_coverage_out_of_range(model: QuantileForecaster, cov: float) -> None:
    with pytest.raises(InputError, match="coverage"):
        model.predict(np.zeros((2, 4)), coverage=cov)


def test_fit_and_predict_validate_input(blocks: dict[str, np.ndarray]) -> None:
    Xt, yt, Xc, yc = blocks["X_train"], blocks["y_train"], blocks["X_cal"], blocks["y_cal"]
    m = QuantileForecaster(**SMALL)
    bad_y = yt.copy()
    bad_y[3] = np.nan
    inf_X = Xt.copy()
    inf_X[5, 1] = np.inf
    cases = [
        (Xt, yt[:-1], Xc, yc),  # length mismatch
        (Xt, bad_y, Xc, yc),  # NaN target
        (inf_X, yt, Xc, yc),  # infinite feature
        (Xt, yt, Xc[:, :3], yc),  # calibration width differs
        (Xt[:30], yt[:30], Xc, yc),  # fewer than 2 x min_child_samples
        (Xt, yt, Xc[:18], yc[:18]),  # no finite band at 0.95 with n < 19
        (Xt[:, 0], yt, Xc, yc),  # 1-D features
    ]
    for args in cases:
        with pytest.raises(InputError):
            m.fit(*args)
    with pytest.raises(InputError, match="feature_names"):
        m.fit(Xt, yt, Xc, yc, feature_names=["a", "b"])


def test_missing_features_are_allowed(blocks: dict[str, np.ndarray]) -> None:
    # NaN marks a missing feature (e.g. no baseline yet); LightGBM routes it
    X_train, X_cal, X_test = (blocks[k].copy() for k in ("X_train", "X_cal", "X_test"))
    for X in (X_train, X_cal, X_test):
        X[::7, 0] = np.nan
    m = QuantileForecaster(levels=(0.8,), **SMALL).fit(X_train, blocks["y_train"], X_cal, blocks["y_cal"])
    lo, med, hi = m.predict(X_test)
    assert np.isfinite(lo).all() and np.all(lo <= med) and np.all(med <= hi)
    phi = m.contributions(X_test)
    np.testing.assert_allclose(phi.sum(axis=1), m.median_model_.predict(X_test), atol=1e-6)
    with pytest.raises(InputError, match="infinite"):
        m.predict(np.full((1, 4), np.inf))


def test_predict_validates_width(model: QuantileForecaster) -> None:
    with pytest.raises(InputError, match="features"):
        model.predict(np.zeros((2, 5)))
    lo, med, hi = model.predict(np.zeros((0, 4)))
    assert lo.shape == med.shape == hi.shape == (0,)


def test_save_load_round_trip(
    model: QuantileForecaster, blocks: dict[str, np.ndarray], tmp_path: Path
) -> None:
    model.save(tmp_path / "m")
    files = sorted(p.name for p in (tmp_path / "m").iterdir())
    assert files == [
        "config.json",
        "lower_0.txt",
        "lower_1.txt",
        "lower_2.txt",
        "lower_3.txt",
        "lower_4.txt",
        "median.txt",
        "upper_0.txt",
        "upper_1.txt",
        "upper_2.txt",
        "upper_3.txt",
        "upper_4.txt",
    ]
    config = json.loads((tmp_path / "m" / "config.json").read_text())
    assert config["versions"]["lightgbm"] == lgb.__version__
    assert config["params"]["n_estimators"] == 40
    assert len(config["levels"][2]["scores"]) == 250
    assert (tmp_path / "m" / "median.txt").read_text().startswith("tree")  # LightGBM text model

    loaded = QuantileForecaster.load(tmp_path / "m")
    X = blocks["X_test"]
    for cov in (0.5, 0.66, 0.8, 0.95):
        for a, b in zip(model.predict(X, coverage=cov), loaded.predict(X, coverage=cov), strict=True):
            assert np.array_equal(a, b)
    assert np.array_equal(model.contributions(X), loaded.contributions(X))
    assert loaded.feature_names_ == model.feature_names_
    assert (loaded.n_train_, loaded.n_cal_) == (model.n_train_, model.n_cal_)


def test_load_missing(tmp_path: Path) -> None:
    with pytest.raises(NotFound):
        QuantileForecaster.load(tmp_path)


def test_deterministic(blocks: dict[str, np.ndarray]) -> None:
    args = (blocks["X_train"], blocks["y_train"], blocks["X_cal"], blocks["y_cal"])
    a = QuantileForecaster(levels=(0.8,), **SMALL).fit(*args)
    b = QuantileForecaster(levels=(0.8,), **SMALL).fit(*args)
    for u, v in zip(a.predict(blocks["X_test"]), b.predict(blocks["X_test"]), strict=True):
        assert np.array_equal(u, v)


def test_treeshap_local_accuracy(model: QuantileForecaster, blocks: dict[str, np.ndarray]) -> None:
    X = blocks["X_test"][:200]
    phi = model.contributions(X)
    assert phi.shape == (200, 5)
    # Local accuracy (Lundberg et al., Nat. Mach. Intell. 2020): SHAP values
    # plus the expected value (last column) add up to the model output.
    raw = model.median_model_.predict(X, raw_score=True)
    np.testing.assert_allclose(phi.sum(axis=1), raw, rtol=0, atol=1e-6)
    # the expected value is one constant; features do move the prediction
    assert np.ptp(phi[:, -1]) == 0 and np.abs(phi[:, :-1]).sum() > 0


class _Prefit(RegressorMixin, BaseEstimator):
    """A fitted LightGBM booster behind the scikit-learn predict API."""

    def __init__(self, booster: lgb.Booster | None = None) -> None:
        self.booster = booster

    def fit(self, X: np.ndarray, y: np.ndarray) -> _Prefit:
        raise NotImplementedError("prefit only")

    def predict(self, X: np.ndarray) -> np.ndarray:
        return self.booster.predict(np.asarray(X, dtype=float))


def _prefit(booster: lgb.Booster) -> _Prefit:
    est = _Prefit(booster)
    est.n_features_in_ = booster.num_feature()  # MAPIE's fitted check
    return est


@pytest.mark.parametrize("cov", [0.8, 0.66, 0.9])
def test_matches_mapie_cqr(model: QuantileForecaster, blocks: dict[str, np.ndarray], cov: float) -> None:
    # Reference: MAPIE 1.x ConformalizedQuantileRegressor (prefit: the same
    # lower, upper, median boosters, in MAPIE's order), symmetric CQR scores.
    i = model.level_for(cov)
    mapie = ConformalizedQuantileRegressor(
        [_prefit(model.lower_models_[i]), _prefit(model.upper_models_[i]), _prefit(model.median_model_)],
        confidence_level=cov,
        prefit=True,
    ).conformalize(blocks["X_cal"], blocks["y_cal"])
    # same conformity scores max(lo - y, y - hi)
    np.testing.assert_allclose(np.sort(mapie.conformity_scores[2]), model.calibrators_[i].scores_, atol=1e-12)

    X = blocks["X_test"]
    point, bands = mapie.predict_interval(X, symmetric_correction=True)
    # MAPIE does not repair crossing; apply our per-row sort to compare
    ref = np.sort(np.stack([bands[:, 0, 0], point, bands[:, 1, 0]], axis=1), axis=1)
    ours = np.stack(model.predict(X, coverage=cov), axis=1)

    # MAPIE's rule (mapie/utils.py, _compute_regression_quantile): numpy
    # quantile, method "lower", at ceil((n + 1)(1 - alpha)) / n, i.e. the k-th
    # smallest score with k = ceil((n + 1) * coverage). Here (n + 1) * coverage
    # is never a whole number (n = 250), so float rounding cannot move k, and
    # the exact rank from rational arithmetic is the one both must use.
    scores = np.sort(mapie.conformity_scores[2])
    k = math.ceil(Fraction(scores.size + 1) * Fraction(str(cov)))
    assert (scores.size + 1) * Fraction(str(cov)) != k  # no whole-number edge case
    q_mapie = np.quantile(scores, math.ceil((scores.size + 1) * cov) / scores.size, method="lower")
    assert q_mapie == scores[k - 1]
    assert model.calibrators_[i].correction(1 - cov) == scores[k - 1]
    np.testing.assert_allclose(ours, ref, rtol=0, atol=1e-12)


@pytest.mark.parametrize("cov", [0.72, 0.86])
def test_end_to_end_coverage(cov: float) -> None:
    # The CQR guarantee (Romano et al. 2019, Thm 1) holds for LightGBM
    # quantiles too, also at a coverage between grid levels. Fewer seeds
    # than in test_calibration, hence a looser tolerance of the same kind.
    n_seeds, n_cal, n_test = 30, 200, 500
    covs = []
    for seed in range(n_seeds):
        rng = np.random.default_rng(1000 + seed)
        X_train, y_train = _data(rng, 300)
        X_cal, y_cal = _data(rng, n_cal)
        X_test, y_test = _data(rng, n_test)
        m = QuantileForecaster(levels=(0.7, 0.9), n_estimators=20, num_threads=1, random_state=seed)
        lo, _, hi = m.fit(X_train, y_train, X_cal, y_cal).predict(X_test, coverage=cov)
        covs.append(np.mean((lo <= y_test) & (y_test <= hi)))
    # tol = 4 standard errors over seeds: a seed's coverage varies as
    # Beta(k, n+1-k) (the conditional coverage of split conformal; Vovk 2012)
    # plus binomial test noise, sd ~ 0.03-0.04 here, so tol ~ 0.02-0.03.
    k = math.ceil((n_cal + 1) * cov)
    a, b = k, n_cal + 1 - k
    var_seed = a * b / ((a + b) ** 2 * (a + b + 1)) + cov * (1 - cov) / n_test
    tol = 4.0 * math.sqrt(var_seed / n_seeds)
    assert cov - tol <= float(np.mean(covs)) <= cov + 1 / (n_cal + 1) + tol
