"""The distribution answer: the summary, the log histogram and the tail fits,
checked against the formulas of Clauset, Shalizi & Newman (SIAM Review 2009)
written out here, and against the `powerlaw` package (Alstott et al. 2014)."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from conftest import NOW

from models.distribution import fit_tail, half_share, log_histogram, summarise
from service.analysis.distribution import distribution


def test_power_law_exponent_is_the_papers_mle() -> None:
    # Continuous power law sampled by inversion: x = xmin (1 - u)^(-1/(alpha-1)).
    rng = np.random.default_rng(3)
    xmin, alpha = 100.0, 2.5
    x = xmin * (1 - rng.random(5000)) ** (-1 / (alpha - 1))
    fits = fit_tail(x, xmin=xmin)
    got = next(f for f in fits.fits if f.law == "power law").params["alpha"]
    # Clauset et al. (2009) eq. 3.1, written out independently.
    expected = 1 + x.size / sum(math.log(v / xmin) for v in x)
    assert got == pytest.approx(expected, rel=1e-12)
    assert got == pytest.approx(alpha, abs=0.06)  # standard error (alpha-1)/sqrt(n) ~ 0.02
    pl_vs_exp = next(c for c in fits.comparisons if c.first == "power law" and c.second == "exponential")
    assert pl_vs_exp.favoured == "power law"


def test_normalised_ratio_and_vuong_p_follow_the_paper() -> None:
    rng = np.random.default_rng(4)
    x = rng.lognormal(5, 1.0, 3000)
    xmin = float(np.quantile(x, 0.5))
    fits = fit_tail(x, xmin=xmin)
    tail = x[x >= xmin]
    n = tail.size
    alpha = 1 + n / np.log(tail / xmin).sum()
    rate = 1 / (tail - xmin).mean()
    # Per-point log-likelihoods of the two laws (Clauset et al. 2009, Table 2.1 normalisations).
    l_pl = np.log((alpha - 1) / xmin) - alpha * np.log(tail / xmin)
    l_ex = np.log(rate) - rate * (tail - xmin)
    d = l_pl - l_ex
    r = d.sum()
    sigma = np.sqrt(((d - d.mean()) ** 2).mean())
    c = next(c for c in fits.comparisons if c.first == "power law" and c.second == "exponential")
    assert c.loglik_ratio == pytest.approx(r, rel=1e-9)
    assert c.normalised_ratio == pytest.approx(r / (sigma * np.sqrt(n)), rel=1e-9)
    # Appendix C: p = erfc(|R| / sqrt(2 n sigma^2)).
    assert c.p_value == pytest.approx(math.erfc(abs(r) / math.sqrt(2 * n * sigma**2)), rel=1e-9, abs=1e-300)


def test_fits_agree_with_the_powerlaw_package() -> None:
    powerlaw = pytest.importorskip("powerlaw")
    rng = np.random.default_rng(1)
    x = rng.lognormal(6, 1.2, 2000)
    ours = fit_tail(x)
    theirs = powerlaw.Fit(x, xmin=ours.xmin, verbose=False)
    fit = {f.law: f.params for f in ours.fits}
    assert fit["power law"]["alpha"] == pytest.approx(theirs.power_law.alpha, rel=1e-9)
    assert fit["log-normal"]["mu"] == pytest.approx(theirs.lognormal.mu, abs=1e-3)
    assert fit["log-normal"]["sigma"] == pytest.approx(theirs.lognormal.sigma, abs=1e-3)
    names = {"log-normal": "lognormal", "power law": "power_law", "exponential": "exponential"}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for c in ours.comparisons:
            nr, p = theirs.distribution_compare(names[c.first], names[c.second], normalized_ratio=True)
            assert c.normalised_ratio == pytest.approx(nr, abs=1e-3)
            assert c.p_value == pytest.approx(p, abs=1e-3)
    # A log-normal sample: the log-normal wins against the exponential.
    assert (
        next(c for c in ours.comparisons if c.second == "exponential" and c.first == "log-normal").favoured
        == "log-normal"
    )


def test_summary_quantiles_and_half_share() -> None:
    x = np.array([1.0] * 90 + [100.0] * 10)  # 10 posts hold 1000 of 1090
    assert half_share(x) == pytest.approx(0.06)  # 6 x 100 = 600 >= 545, 5 x 100 = 500 is not
    s = summarise(x)
    assert (s.median, s.q1, s.q3) == (1.0, 1.0, 1.0)
    assert s.p99 == 100.0
    bins = log_histogram([1, 10, 100, 1000], bins=3)
    assert [b.count for b in bins] == [1, 1, 2]
    assert bins[0].low == 1 and bins[-1].high == pytest.approx(1000)


def test_demo_distribution(demo_workspace) -> None:
    a = distribution(demo_workspace, now=NOW)
    assert a.n_posts == sum(b.count for b in a.histogram) + a.zero_posts
    assert a.summary.q1 <= a.summary.median <= a.summary.q3 <= a.summary.p90 <= a.summary.p99
    assert 0 < a.summary.half_share < 0.5  # impressions are skewed
    assert a.tail is not None and a.tail.n_tail >= 30
    assert "association" in a.note and a.reading.startswith("Half of all impressions")
    one = distribution(demo_workspace, now=NOW, account="loomhaven", since=None)
    assert one.n_posts < a.n_posts
