"""CQR scores, the conformal quantile rule and the coverage guarantee."""

from __future__ import annotations

import math

import numpy as np
import pytest

from models.calibration import CQRCalibrator, conformal_quantile, cqr_scores
from models.errors import InputError, NotFittedError


def test_cqr_scores_formula() -> None:
    y = np.array([0.0, 5.0, 2.0])
    lo = np.array([1.0, 0.0, 1.0])
    hi = np.array([3.0, 4.0, 4.0])
    # below the band: lo - y; above: y - hi; inside: minus distance to nearer edge
    # (Romano, Patterson & Candes 2019, eq. 6)
    np.testing.assert_array_equal(cqr_scores(y, lo, hi), [1.0, 1.0, -1.0])


def test_conformal_quantile_is_kth_smallest() -> None:
    scores = np.random.default_rng(0).permutation(np.arange(1.0, 101.0))  # 1..100
    # k = ceil(101 * 0.8) = 81 -> the 81st smallest score is 81
    assert conformal_quantile(scores, 0.2) == 81.0
    # k = ceil(101 * 0.9) = 91
    assert conformal_quantile(scores, 0.1) == 91.0
    # k = ceil(101 * 0.995) = 101 > n: no finite quantile
    assert conformal_quantile(scores, 0.005) == math.inf


def test_conformal_quantile_exact_integer_level() -> None:
    # (n + 1)(1 - alpha) = 20 * 0.95 = 19 exactly, so k = 19 <= n = 19: finite
    # (a naive float ceil gives 20 and +inf)
    assert conformal_quantile(np.arange(19.0), 0.05) == 18.0


def test_conformal_quantile_rejects_bad_input() -> None:
    with pytest.raises(InputError):
        conformal_quantile([], 0.1)
    with pytest.raises(InputError):
        conformal_quantile([1.0, 2.0], 0.0)
    with pytest.raises(InputError):
        conformal_quantile([1.0, np.nan], 0.5)


def test_calibrator_corrections_and_transform() -> None:
    rng = np.random.default_rng(1)
    y = rng.normal(size=99)
    lo, hi = np.full(99, -0.5), np.full(99, 0.5)
    cal = CQRCalibrator(alpha=0.2).fit(y, lo, hi)
    assert np.all(np.diff(cal.scores_) >= 0)
    assert cal.correction_ == conformal_quantile(cqr_scores(y, lo, hi), 0.2)
    # a smaller alpha needs a larger (or equal) widening, from the same scores
    assert cal.correction(0.05) >= cal.correction() >= cal.correction(0.5)
    assert cal.correction(0.05) == conformal_quantile(cal.scores_, 0.05)
    new_lo, new_hi = cal.transform([0.0, 1.0], [2.0, 3.0])
    q = cal.correction_
    np.testing.assert_allclose(new_lo, [-q, 1.0 - q])
    np.testing.assert_allclose(new_hi, [2.0 + q, 3.0 + q])
    # over-covering quantile models are shrunk: negative correction
    wide = CQRCalibrator(alpha=0.2).fit(y, np.full(99, -10.0), np.full(99, 10.0))
    assert wide.correction_ < 0


def test_calibrator_not_fitted() -> None:
    with pytest.raises(NotFittedError, match="not fitted"):
        CQRCalibrator().transform([0.0], [1.0])


def _heteroscedastic(rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
    x = rng.uniform(0.0, 4.0, size=n)
    y = np.sin(2.0 * x) + x + rng.normal(size=n) * (0.1 + 0.6 * x)
    return x, y


def _bad_band(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    # Deliberately wrong quantile "models": shifted centre, constant width,
    # blind to the noise growing with x.
    centre = 0.8 * x
    return centre - 0.4, centre + 0.6


@pytest.mark.parametrize("alpha", [0.1, 0.2, 0.3])
def test_split_conformal_coverage_guarantee(alpha: float) -> None:
    # Split-conformal guarantee (Lei et al., JASA 2018, Thm 2.2; Romano,
    # Patterson & Candes, NeurIPS 2019, Thm 1): for exchangeable rows and
    # continuous scores, 1 - alpha <= P(y in band) <= 1 - alpha + 1/(n + 1),
    # whatever the quantile models.
    n_seeds, n_cal, n_test = 200, 200, 500
    covered, raw_covered = [], []
    for seed in range(n_seeds):
        rng = np.random.default_rng(seed)
        x_cal, y_cal = _heteroscedastic(rng, n_cal)
        x_test, y_test = _heteroscedastic(rng, n_test)
        cal = CQRCalibrator(alpha=alpha).fit(y_cal, *_bad_band(x_cal))
        lo_raw, hi_raw = _bad_band(x_test)
        lo, hi = cal.transform(lo_raw, hi_raw)
        covered.append(np.mean((lo <= y_test) & (y_test <= hi)))
        raw_covered.append(np.mean((lo_raw <= y_test) & (y_test <= hi_raw)))
    mean_cov = float(np.mean(covered))

    # tol = 4 standard errors of the mean over seeds. Given the calibration
    # block, a test row is covered with probability p ~ Beta(k, n + 1 - k),
    # k = ceil((n + 1)(1 - alpha)) (Vovk 2012; Angelopoulos & Bates 2021,
    # sec. 3.2), and a seed's test share adds binomial noise p(1-p)/n_test.
    k = math.ceil((n_cal + 1) * (1 - alpha))
    a, b = k, n_cal + 1 - k
    var_p = a * b / ((a + b) ** 2 * (a + b + 1))
    var_seed = var_p + (1 - alpha) * alpha / n_test
    tol = 4.0 * math.sqrt(var_seed / n_seeds)  # about 0.008-0.01 here
    assert 1 - alpha - tol <= mean_cov <= 1 - alpha + 1 / (n_cal + 1) + tol
    # the uncorrected band misses badly, so the check above is not vacuous
    assert abs(float(np.mean(raw_covered)) - (1 - alpha)) > 0.1
