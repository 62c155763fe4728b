"""Confidence intervals for a proportion (how often forecasts held)."""

from __future__ import annotations


def wilson_interval(held: int, scored: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval for ``held`` successes out of ``scored`` trials.

    scipy's binomtest carries it (a runtime dependency already), so a plain
    install needs no statistics package beyond scipy.
    """
    from scipy.stats import binomtest

    ci = binomtest(held, scored).proportion_ci(confidence_level=confidence, method="wilson")
    return float(ci.low), float(ci.high)
