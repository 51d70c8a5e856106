"""Recurrence: how many times a campaign repeats, and how many share a fixed commitment."""

import numpy as np

from service.domain.arrays import ArrayLike, Floats, as_floats
from service.domain.campaign import Recurrence
from service.domain.units import HOURS_PER_MONTH, MONTHS_PER_YEAR


def instances_total(recurrence: Recurrence | None) -> Floats:
    """Campaign instances over the recurrence horizon: ⌊for_months / every_months⌋, at least 1."""
    if recurrence is None:
        return np.asarray(1.0)
    return np.maximum(
        1.0, np.floor(as_floats(recurrence.for_months) / as_floats(recurrence.every_months) + 1e-9)
    )


def instances_per_year(recurrence: Recurrence | None) -> Floats:
    """Instances a year while the campaign recurs (1 for a one-off campaign)."""
    if recurrence is None:
        return np.asarray(1.0)
    return np.maximum(1.0, MONTHS_PER_YEAR / as_floats(recurrence.every_months))


def sharing_calendar(recurrence: Recurrence) -> tuple[Floats, Floats]:
    """What limits the instances sharing a commitment by the calendar: the months between instances
    and the instances in all."""
    return as_floats(recurrence.every_months), instances_total(recurrence)


def instances_sharing(
    *, window_months: ArrayLike, wall_hours: ArrayLike, recurrence: Recurrence | None
) -> Floats:
    """Instances that can share a commitment of `window_months` on the same nodes.

    Limited by the calendar (one instance every `every_months`), by the horizon, and by capacity
    (instances run one after another, each taking `wall_hours`); never fewer than one.
    """
    window = as_floats(window_months)
    if recurrence is None:  # one instance: a broadcastable 1 rather than a whole grid of them
        return np.ones((1,) * max(window.ndim, np.ndim(wall_hours)))
    every, total = sharing_calendar(recurrence)
    if window.ndim == 2:  # (S, K) layouts: a swept recurrence varies by scenario, along axis 0
        every, total = every.reshape(-1, 1), total.reshape(-1, 1)
    by_calendar = np.floor(window / every + 1e-9)
    by_capacity = np.floor(window * HOURS_PER_MONTH / as_floats(wall_hours) + 1e-9)
    return np.maximum(1.0, np.minimum(np.minimum(by_calendar, by_capacity), total))


def starts_by_month(*, spacing_months: ArrayLike, count: ArrayLike, months: int) -> Floats:
    """How many of `count` events, event j starting in month ⌊j · spacing⌋ (months counted from 0),
    start in each of months 0 … months − 1: (…, months)."""
    spacing = as_floats(spacing_months)[..., np.newaxis]
    total = as_floats(count)[..., np.newaxis]
    through = np.clip(np.ceil(np.arange(1, months + 1) / spacing - 1e-9), 0.0, total)  # started in 0 … m
    started = through.copy()  # the month's count less the month before's (np.diff from 0 costs three times as much)
    started[..., 1:] -= through[..., :-1]
    return started


def instances_by_month(recurrence: Recurrence | None, months: int) -> Floats:
    """Instances of the campaign starting in each month 0 … months − 1: one every `every_months`
    while the recurrence lasts; a one-off campaign starts in month 0."""
    if recurrence is None:  # what starts_by_month gives for one event, without its arithmetic
        once = np.zeros(months)
        once[:1] = 1.0
        return once
    return starts_by_month(spacing_months=recurrence.every_months, count=instances_total(recurrence),
                           months=months)


def programme_months(recurrence: Recurrence | None) -> Floats:
    """Months from the first instance's start to the end of the month the last one starts in."""
    if recurrence is None:
        return np.asarray(1.0)
    return np.floor((instances_total(recurrence) - 1.0) * as_floats(recurrence.every_months) + 1e-9) + 1.0
