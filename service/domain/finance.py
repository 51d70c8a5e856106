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

