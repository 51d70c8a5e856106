"""Money over time: the annuity that turns a purchase into a monthly charge (model.md §6)."""

import numpy as np

from service.domain.arrays import ArrayLike, Floats, as_floats
from service.domain.units import MONTHS_PER_YEAR


def monthly_rate(annual_rate: ArrayLike) -> Floats:
    """The monthly cost of capital used throughout: the nominal annual rate over 12."""
    return as_floats(annual_rate) / MONTHS_PER_YEAR


def capital_recovery_payment(
    *, principal: ArrayLike, rate: ArrayLike, periods: ArrayLike, residual: ArrayLike = 0.0
) -> Floats:
    """Level payment per period that repays `principal` less the discounted `residual`.

    Equals pmt(rate, periods, −principal, residual) of numpy-financial:
    (P·(1+i)^n − F)·i / ((1+i)^n − 1), and (P − F)/n when i = 0. With F = 0 this is P times
    the capital recovery factor A/P = i(1+i)^n / ((1+i)^n − 1).
    """
    p = as_floats(principal)
    i = as_floats(rate)
    n = as_floats(periods)
    f = as_floats(residual)
    growth = np.power(1.0 + i, n)
    safe_i = np.where(i == 0.0, 1.0, i)
    # (1+i)^n − 1 via expm1/log1p: exact for tiny i, where growth − 1 would round to 0.
    with_interest = (p * growth - f) * safe_i / np.where(i == 0.0, 1.0, np.expm1(n * np.log1p(i)))
    return np.where(i == 0.0, (p - f) / n, with_interest)



def discount_factors(rate: ArrayLike, periods: int) -> Floats:
    """(1 + i)^−t for t = 0 … periods − 1, along the last axis: (…, periods)."""
    i = as_floats(rate)[..., np.newaxis]
    return np.power(1.0 + i, -np.arange(periods, dtype=np.float64))


def present_value(flows: ArrayLike, rate: ArrayLike) -> Floats:
    """Σ_t flows[t] / (1 + i)^t over the last axis, t from 0: numpy-financial's `npv(rate, values)`."""
    values = as_floats(flows)
    return np.asarray((values * discount_factors(rate, values.shape[-1])).sum(axis=-1))


def discounted_payback(*, investment: ArrayLike, inflows: ArrayLike, rate: ArrayLike) -> Floats:
    """Periods until the discounted inflows repay an investment made at t = 0.

    `inflows[..., t]` arrives at the end of period t + 1 and is discounted by (1 + i)^−(t+1); the
    answer is the last whole period before the cumulative discounted inflow reaches the investment
    plus the share of the next period's inflow needed, the textbook convention (Ross, Westerfield
    and Jordan, "Fundamentals of Corporate Finance", ch. 9, "The Discounted Payback"). inf when the
    inflows never repay it within the periods given; 0 for no investment.
    """
    values = as_floats(inflows)
    periods = values.shape[-1]
    discounted = values * discount_factors(rate, periods + 1)[..., 1:]
    cumulative = np.cumsum(discounted, axis=-1)
    owed = as_floats(investment)[..., np.newaxis]
    reached = cumulative >= owed * (1.0 - 1e-12)
    first = np.argmax(reached, axis=-1)[..., np.newaxis]
    before = np.where(first > 0, np.take_along_axis(cumulative, np.maximum(first - 1, 0), axis=-1), 0.0)
    step = np.take_along_axis(discounted, first, axis=-1)
    fraction = np.where(step > 0.0, (owed - before) / np.where(step > 0.0, step, 1.0), 1.0)
    answer = (first + np.clip(fraction, 0.0, 1.0))[..., 0]
    answer = np.where(reached.any(axis=-1), answer, np.inf)
    return np.asarray(np.where(as_floats(investment) <= 0.0, 0.0, answer))
