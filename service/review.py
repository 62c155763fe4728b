"""Draft review, before pressing publish: where each piece now lives.

* near-repeats: :mod:`service.repeats`
* best hours: :mod:`service.hours`
* wordings compared (variants): :mod:`service.wordings`
* telling options apart (one rule for both): :mod:`service.overlap`

Kept so that ``from service.review import ...`` keeps working; new code
imports from the modules above.
"""

from __future__ import annotations

from service.hours import HoursReport, Slot, best_hours, day_slots, parse_day
from service.overlap import RULE, heavy_overlap, tied_with_best
from service.repeats import Repeat, near_repeats, near_repeats_many
from service.wordings import MAX_VARIANTS, Variant, VariantsReport, compare_variants

__all__ = [
    "MAX_VARIANTS",
    "RULE",
    "HoursReport",
    "Repeat",
    "Slot",
    "Variant",
    "VariantsReport",
    "best_hours",
    "compare_variants",
    "day_slots",
    "heavy_overlap",
    "near_repeats",
    "near_repeats_many",
    "parse_day",
    "tied_with_best",
]
