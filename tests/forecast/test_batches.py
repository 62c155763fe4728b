"""Batches share their work and answer as one-at-a-time requests do:
the hours of a day, several wordings, and drafts that repeat a text."""

from __future__ import annotations

from datetime import date

import numpy as np
from conftest import NOW

from service.forecast.draft import Draft
from service.review.hours import best_hours, day_slots

TEXT = "Snowdrops along the woodland walk this week: come early, before the frost lifts."
OTHER = "Volunteer morning in the propagation house, all ages welcome."


def test_a_day_of_hours_equals_each_hour_asked_alone(demo_workspace) -> None:
    fc = demo_workspace.forecaster
    day = date(2026, 3, 10)
    report = best_hours(fc, TEXT, account="loomhaven", day=day, now=NOW)
    instants = day_slots(day, "Europe/London")
    assert len(report.slots) == len(instants) == 24
    # A few hours, each as its own forecast of one draft (own embedding, own
    # search, own prediction call), give the numbers of the batched day.
    for i in (0, 9, 17):
        alone = fc.forecast([Draft(text=TEXT, account="loomhaven", planned_at=instants[i])], now=NOW)[0]
        s = report.slots[i]
        np.testing.assert_allclose(s.log, alone.log, rtol=0, atol=1e-9)
        assert (s.low, s.median, s.high) == (alone.low, alone.median, alone.high)


def test_repeated_texts_are_embedded_once_and_answer_alike(demo_workspace) -> None:
    fc = demo_workspace.forecaster
    calls: list[list[str]] = []
    encode = fc._encode

    def counting(texts: list[str]) -> np.ndarray:
        calls.append(list(texts))
        return encode(texts)

    fc._encode = counting
    try:
        drafts = [Draft(text=t, account="loomhaven") for t in (TEXT, OTHER, TEXT)]
        batch = fc.forecast(drafts, now=NOW)
    finally:
        fc._encode = encode
    assert calls == [[TEXT, OTHER]]  # each distinct text once
    alone = [fc.forecast([d], now=NOW)[0] for d in drafts]
    for b, a in zip(batch, alone, strict=True):
        np.testing.assert_allclose(b.log, a.log, rtol=0, atol=1e-9)
    # Equal to float noise: a matrix product may block two rows differently.
    np.testing.assert_allclose(batch[0].log, batch[2].log, rtol=0, atol=1e-12)
