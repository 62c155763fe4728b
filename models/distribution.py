"""How one metric is spread over the posts: a summary, a histogram on a log
axis, and which heavy-tailed law describes its upper tail best.

The fits follow Clauset, Shalizi & Newman, "Power-law distributions in
empirical data" (SIAM Review 51, 2009):

- the tail starts at ``xmin``, chosen as the value that makes the fitted
  power law closest to the data by the Kolmogorov–Smirnov distance (their
  section 3.3), among candidates at the data's quantiles;
- on the tail, the continuous power law's maximum-likelihood exponent is
  ``alpha = 1 + n / sum(ln(x / xmin))`` (their eq. 3.1); the exponential and
  the log-normal are fitted by maximum likelihood truncated at ``xmin``;
- two laws are compared by their log-likelihood ratio ``R`` summed over the
  tail, normalised by its standard error: ``R / (sigma * sqrt(n))``, with the
  two-sided p-value of Vuong's test ``erfc(|R| / (sigma * sqrt(2 n)))``
  (their section 5.1 and appendix C). A small p means the sign of ``R`` can
  be trusted; a large one means the data cannot tell the two laws apart.

Counts are treated as continuous; for metrics in the hundreds and above the
difference is negligible (Clauset et al., section 2).
"""

from __future__ import annotations

import math

import numpy as np
import numpy.typing as npt
from pydantic import BaseModel, Field

from models.errors import InputError

#: The laws compared, by the names the answer uses.
LAWS: tuple[str, ...] = ("log-normal", "power law", "exponential")
#: A comparison's p-value below this counts as telling the laws apart.
CLEAR_P = 0.1
#: At least this many posts in the tail for a fit worth stating.
MIN_TAIL = 30
#: xmin candidates: at most this many quantiles of the data are tried.
XMIN_CANDIDATES = 60
HISTOGRAM_BINS = 24


class Summary(BaseModel):
    """Where the values sit: quantiles and how concentrated the total is."""

    n: int
    total: float
    median: float
    q1: float = Field(description="25th percentile (the central half starts here)")
    q3: float = Field(description="75th percentile (the central half ends here)")
    p90: float
    p99: float
    half_share: float = Field(
        description="Smallest fraction of posts (the best first) whose values add up to half the total"
    )


class Bin(BaseModel):
    low: float
    high: float
    count: int


class LawFit(BaseModel):
    law: str
    params: dict[str, float] = Field(description="Maximum-likelihood parameters on the tail")
    loglik: float = Field(description="Log-likelihood summed over the tail")


class Comparison(BaseModel):
    """Law ``first`` against law ``second`` on the same tail."""

    first: str
    second: str
    loglik_ratio: float = Field(description="R: first's log-likelihood minus second's, summed")
    normalised_ratio: float = Field(description="R / (sigma * sqrt(n)); positive favours first")
    p_value: float = Field(description="Vuong's two-sided p-value for the sign of R")
    favoured: str | None = Field(description="The law the data favour, or null when p >= 0.1")


class TailFits(BaseModel):
    xmin: float = Field(description="Where the tail starts (KS-minimising, Clauset et al. 2009)")
    n_tail: int
    tail_share: float = Field(description="Share of the posts at or above xmin")
    ks_distance: float = Field(description="Kolmogorov–Smirnov distance of the power law at xmin")
    fits: list[LawFit]
    comparisons: list[Comparison]
    best: str | None = Field(description="The law favoured against both others, or null")


# --------------------------------------------------------------------------
# Summary and histogram


def half_share(values: npt.ArrayLike) -> float:
    """Smallest fraction of posts, taken from the top, holding half the total."""
    x = np.sort(np.asarray(values, dtype=np.float64))[::-1]
    total = float(x.sum())
    if x.size == 0 or total <= 0:
        return float("nan")
    k = int(np.searchsorted(np.cumsum(x), total / 2.0)) + 1
    return min(k, x.size) / x.size


def summarise(values: npt.ArrayLike) -> Summary:
    x = np.asarray(values, dtype=np.float64)
    if x.size == 0:
        raise InputError("no values to summarise", field="metric")
    q1, med, q3, p90, p99 = np.quantile(x, [0.25, 0.5, 0.75, 0.9, 0.99])
    return Summary(
        n=int(x.size),
        total=float(x.sum()),
        median=float(med),
        q1=float(q1),
        q3=float(q3),
        p90=float(p90),
        p99=float(p99),
        half_share=half_share(x),
    )


def log_histogram(values: npt.ArrayLike, bins: int = HISTOGRAM_BINS) -> list[Bin]:
    """Counts in bins of equal width on a log axis (positive values only)."""
    x = np.asarray(values, dtype=np.float64)
    x = x[x > 0]
    if x.size == 0:
        return []
    lo, hi = float(x.min()), float(x.max())
    if hi <= lo:
        return [Bin(low=lo, high=hi, count=int(x.size))]
    edges = np.geomspace(lo, hi, bins + 1)
    counts, _ = np.histogram(x, bins=edges)
    return [
        Bin(low=float(a), high=float(b), count=int(c))
        for a, b, c in zip(edges[:-1], edges[1:], counts, strict=True)
    ]


# --------------------------------------------------------------------------
# The three laws on a tail: per-point log-densities


def power_law_alpha(tail: np.ndarray, xmin: float) -> float:
    """Clauset et al. (2009) eq. 3.1: the continuous MLE."""
    return 1.0 + tail.size / float(np.log(tail / xmin).sum())


def _power_law_logpdf(tail: np.ndarray, xmin: float, alpha: float) -> np.ndarray:
    out: np.ndarray = np.log((alpha - 1.0) / xmin) - alpha * np.log(tail / xmin)
    return out


def _exponential_logpdf(tail: np.ndarray, xmin: float) -> tuple[np.ndarray, float]:
    mean_excess = float((tail - xmin).mean())
    rate = 1.0 / mean_excess if mean_excess > 0 else 1e12
    return np.log(rate) - rate * (tail - xmin), rate


def _lognormal_logpdf(tail: np.ndarray, xmin: float, mu: float, sigma: float) -> np.ndarray:
    from scipy.special import log_ndtr

    logx = np.log(tail)
    z0 = (math.log(xmin) - mu) / sigma
    # log of the density over P(X >= xmin), the survival function in log form
    # so that a tail far past the mode keeps its precision.
    out: np.ndarray = (
        -logx
        - math.log(sigma)
        - 0.5 * math.log(2 * math.pi)
        - 0.5 * ((logx - mu) / sigma) ** 2
        - float(log_ndtr(-z0))
    )
    return out


def _fit_lognormal(tail: np.ndarray, xmin: float) -> tuple[float, float]:
    from scipy.optimize import minimize

    logx = np.log(tail)
    start = np.array([float(logx.mean()), math.log(max(float(logx.std()), 1e-3))])

    def nll(theta: np.ndarray) -> float:
        mu, log_sigma = float(theta[0]), float(theta[1])
        return -float(_lognormal_logpdf(tail, xmin, mu, math.exp(log_sigma)).sum())

    best = minimize(nll, start, method="Nelder-Mead", options={"xatol": 1e-7, "fatol": 1e-9, "maxiter": 4000})
    return float(best.x[0]), math.exp(float(best.x[1]))


def compare(first: np.ndarray, second: np.ndarray) -> tuple[float, float, float]:
    """R, R / (sigma sqrt n) and Vuong's p from per-point log-likelihoods."""
    d = np.asarray(first, dtype=np.float64) - np.asarray(second, dtype=np.float64)
    n = d.size
    r = float(d.sum())
    sigma = float(d.std())
    if n < 2 or sigma == 0:
        return r, 0.0, 1.0
    return r, r / (sigma * math.sqrt(n)), math.erfc(abs(r) / (sigma * math.sqrt(2 * n)))


def choose_xmin(values: np.ndarray, *, min_tail: int = MIN_TAIL) -> tuple[float, float]:
    """The KS-minimising xmin among the data's quantiles, and its distance."""
    x = np.sort(values[values > 0])
    top = x.size - min_tail
    if top < 0:
        raise InputError(
            f"only {x.size} positive values; a tail fit needs at least {min_tail}", field="metric"
        )
    cands = np.unique(np.quantile(x[: top + 1], np.linspace(0, 1, XMIN_CANDIDATES)))
    best_xmin, best_d = float(x[0]), math.inf
    for xmin in cands:
        tail = x[np.searchsorted(x, xmin, side="left") :]
        if tail.size < min_tail or np.all(tail == xmin):
            continue
        alpha = power_law_alpha(tail, float(xmin))
        emp = np.arange(1, tail.size + 1) / tail.size
        model = 1.0 - (tail / xmin) ** (1.0 - alpha)
        d = float(max(np.abs(emp - model).max(), np.abs(emp - 1.0 / tail.size - model).max()))
        if d < best_d:
            best_xmin, best_d = float(xmin), d
    return best_xmin, best_d


def fit_tail(values: npt.ArrayLike, *, xmin: float | None = None, min_tail: int = MIN_TAIL) -> TailFits:
    """Fit the three laws to the values at or above ``xmin`` (chosen by KS
    when not given) and compare each pair."""
    x = np.asarray(values, dtype=np.float64)
    x = x[np.isfinite(x) & (x > 0)]
    ks = float("nan")
    if xmin is None:
        xmin, ks = choose_xmin(x, min_tail=min_tail)
    tail = np.sort(x[x >= xmin])
    if tail.size < min_tail:
        raise InputError(
            f"only {tail.size} values at or above {xmin:g}; a fit needs {min_tail}", field="metric"
        )
    alpha = power_law_alpha(tail, xmin)
    mu, sigma = _fit_lognormal(tail, xmin)
    exp_ll, rate = _exponential_logpdf(tail, xmin)
    ll = {
        "log-normal": _lognormal_logpdf(tail, xmin, mu, sigma),
        "power law": _power_law_logpdf(tail, xmin, alpha),
        "exponential": exp_ll,
    }
    fits = [
        LawFit(law="log-normal", params={"mu": mu, "sigma": sigma}, loglik=float(ll["log-normal"].sum())),
        LawFit(law="power law", params={"alpha": alpha}, loglik=float(ll["power law"].sum())),
        LawFit(law="exponential", params={"rate": rate}, loglik=float(ll["exponential"].sum())),
    ]
    comparisons = []
    wins: dict[str, int] = dict.fromkeys(LAWS, 0)
    for a, b in (("log-normal", "power law"), ("log-normal", "exponential"), ("power law", "exponential")):
        r, nr, p = compare(ll[a], ll[b])
        favoured = None if p >= CLEAR_P else (a if r > 0 else b)
        if favoured:
            wins[favoured] += 1
        comparisons.append(
            Comparison(first=a, second=b, loglik_ratio=r, normalised_ratio=nr, p_value=p, favoured=favoured)
        )
    best = next((law for law, w in wins.items() if w == 2), None)
    return TailFits(
        xmin=float(xmin),
        n_tail=int(tail.size),
        tail_share=tail.size / x.size,
        ks_distance=ks,
        fits=fits,
        comparisons=comparisons,
        best=best,
    )


def reading(summary: Summary, fits: TailFits | None, metric: str) -> str:
    """The distribution in plain words, for a manager."""
    share = summary.half_share
    head = f"Half of all {metric} came from the best {100 * share:.0f}% of posts"
    if share <= 0.2:
        head += ": a few posts take most of the reach."
    elif share <= 0.35:
        head += ": reach is uneven, a minority of posts carries much of it."
    else:
        head += ": reach is spread fairly evenly over the posts."
    if fits is None:
        return head + " Too few posts to say which law the top follows."
    pl = next(c for c in fits.comparisons if c.first == "log-normal" and c.second == "power law")
    if fits.best == "log-normal":
        tail = (
            "The top posts follow a log-normal shape: big hits happen, but the very biggest "
            "are rarer than a power law would have."
        )
    elif fits.best == "power law":
        tail = (
            "The top posts follow a power law: there is no typical size for a hit, and a rare "
            "post can dwarf all the rest."
        )
    elif fits.best == "exponential":
        tail = "The top posts fall off quickly (exponential): very large outliers are unlikely."
    elif not any(c.favoured for c in fits.comparisons):
        tail = (
            "Among the top posts, a log-normal, a power law and an exponential fit about "
            "equally well: too few big posts to tell them apart."
        )
    elif pl.favoured is None:
        tail = (
            "The top posts fit a log-normal and a power law about equally well: the data "
            "cannot tell them apart."
        )
    else:
        tail = f"The top posts lean towards a {pl.favoured}, though not against every other law."
    return f"{head} {tail}"


__all__ = [
    "LAWS",
    "Bin",
    "Comparison",
    "LawFit",
    "Summary",
    "TailFits",
    "choose_xmin",
    "compare",
    "fit_tail",
    "half_share",
    "log_histogram",
    "power_law_alpha",
    "reading",
    "summarise",
]
