"""The adaptive layer's rule before real outcomes arrive.

Adaptive conformal inference (Gibbs & Candès 2021) moves its working level
``alpha_t`` after each scored outcome. Before the track record holds real
outcomes, settled posts forecast as they would have been (pseudo-outcomes)
warm the level up. Those are forecasts the team never saw, made through a
slightly different path than the calibration rows, so a run of their misses
is weak evidence: letting it widen the served band made later drafts
over-covered (wider than their stated coverage). Until ``min_real`` real
outcomes exist, the level may still narrow the band but never widens it;
``reason`` says in words why the level stands where it does.
"""

from __future__ import annotations


def served_shift(shift: float, *, real_outcomes: int, min_real: int) -> tuple[float, bool]:
    """``(shift, held)``: the extra widening to serve, and whether a widening
    was held back because fewer than ``min_real`` real outcomes exist."""
    if shift > 0.0 and int(real_outcomes) < int(min_real):
        return 0.0, True
    return float(shift), False


def reason(*, alpha: float, alpha_t: float, real: int, pseudo: int, min_real: int, held: bool) -> str:
    """Why the working level moved (or did not), in plain words."""
    if real == 0 and pseudo == 0:
        return "no outcome seen yet: the interval is as trained"
    seen = f"{real} scored forecasts" + (f" and {pseudo} settled posts forecast afterwards" if pseudo else "")
    if abs(alpha_t - alpha) < 1e-12:
        return f"{seen} held as often as stated: the level has not moved"
    way = "missed more often than stated" if alpha_t < alpha else "held more often than stated"
    moved = f"{seen} {way}, moving the level from {alpha:.3f} to {alpha_t:.3f}"
    if held:
        return f"{moved}; not widened until {min_real} forecasts are scored ({real} so far)"
    return moved
