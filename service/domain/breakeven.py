"""Break-even: the utilisation, demand and months at which owning beats renting (model.md §8)."""

from dataclasses import dataclass

import numpy as np

from service.domain.arrays import ArrayLike, Bools, Floats, as_floats, broadcast
from service.domain.finance import discounted_payback, monthly_rate
from service.domain.owning import chargeback_per_accelerator_hour
from service.domain.units import HOURS_PER_MONTH, HOURS_PER_YEAR

CURVE_UTILISATIONS = np.round(np.linspace(0.05, 1.0, 20), 2)

NO_MARGIN = "rent_below_owned_energy"
ABOVE_FULL_USE = "needs_more_than_full_utilisation"
RULED_OUT = "rented_option_ruled_out"
NO_SAVING = "rent_never_covers_running_cost"
BEYOND_LIFE = "beyond_depreciation_life"


@dataclass(frozen=True)
class BreakEven:
    """One owned site against one rented price; NaN where there is no break-even (see the reason)."""

    utilisation: Floats
    utilisation_unbounded: Floats
    accelerator_hours_per_year: Floats
    campaigns_per_year: Floats
    ruled_out: Bools  # the rented option failed a screen: it has no break-even row
    utilisation_reason: np.ndarray  # a code where there is no break-even utilisation, "" where there is one


def breakeven_utilisation(
    *, fixed_per_node_month: ArrayLike, accelerators_per_node: ArrayLike,
    variable_per_accelerator_hour: ArrayLike, rented_per_accelerator_hour: ArrayLike,
) -> Floats:
    """u* = F / (A · 730 · (p − v)): where c(u) meets the rented price p; inf when p ≤ v (the division
    there is made and dropped, which costs a sweep less than guarding it)."""
    margin = as_floats(rented_per_accelerator_hour) - as_floats(variable_per_accelerator_hour)
    with np.errstate(all="ignore"):
        value = as_floats(fixed_per_node_month) / (as_floats(accelerators_per_node) * HOURS_PER_MONTH * margin)
    return np.where(margin > 0.0, value, np.inf)


def within_reach(utilisation: Floats, ruled_out: ArrayLike) -> Bools:
    """Where a break-even utilisation is one a site can reach (at most full use) against a rented
    option that passed its screens."""
    return np.asarray((utilisation <= 1.0) & ~np.asarray(ruled_out, dtype=bool))


def break_even(
    *, fixed_per_node_month: ArrayLike, accelerators_per_node: int, variable_per_accelerator_hour: ArrayLike,
    rented_per_accelerator_hour: ArrayLike, fleet_nodes: ArrayLike, campaign_accelerator_hours: ArrayLike,
    ruled_out: ArrayLike = False,
) -> BreakEven:
    """Break-even utilisation of a fleet of `fleet_nodes` against a rented price, and the demand it
    means: u* · A · nodes · 8760 accelerator-hours a year, or that many campaigns."""
    u = breakeven_utilisation(
        fixed_per_node_month=fixed_per_node_month, accelerators_per_node=accelerators_per_node,
        variable_per_accelerator_hour=variable_per_accelerator_hour,
        rented_per_accelerator_hour=rented_per_accelerator_hour)
    out = np.asarray(ruled_out, dtype=bool)
    reachable = within_reach(u, out)
    hours = np.where(reachable, u * accelerators_per_node * as_floats(fleet_nodes) * HOURS_PER_YEAR, np.nan)
    unbounded = np.where(out, np.nan, u)
    reason = np.where(np.isfinite(unbounded), np.where(unbounded <= 1.0, "", ABOVE_FULL_USE), NO_MARGIN)
    return BreakEven(
        utilisation=np.where(reachable, u, np.nan),
        utilisation_unbounded=unbounded,
        accelerator_hours_per_year=hours,
        campaigns_per_year=hours / as_floats(campaign_accelerator_hours),
        ruled_out=broadcast(out, np.shape(u)),
        utilisation_reason=np.where(out, RULED_OUT, reason),
    )


@dataclass(frozen=True)
class Payback:
    """Discounted payback of buying new nodes instead of renting (model.md §8)."""

    months: Floats  # NaN where they do not pay back within the depreciation life
    recovered_fraction: Floats  # the discounted saving within the life over the capex
    demand_hours_per_month: Floats  # the stated demand the new nodes serve, on average
    saving_never_positive: Bools
    reason: np.ndarray  # a code where there are no months, "" where there are


def payback(
    *, capex: ArrayLike, running_per_month: ArrayLike, capacity_hours_per_month: ArrayLike,
    campaign_hours_by_month: ArrayLike, background_utilisation: ArrayLike,
    rented_per_accelerator_hour: ArrayLike, variable_per_accelerator_hour: ArrayLike,
    cost_of_capital_annual: ArrayLike,
) -> Payback:
    """Months until the discounted rent saved repays the capex of new nodes (model.md §8).

    Demand in month t (t = 1 … life, the last axis of `campaign_hours_by_month`): the campaign's
    accelerator-hours that month plus background work at the site's current utilisation, at most
    the new nodes' hours: h_t = min(capacity, campaign_t + u_bg · capacity). Saved in month t:
    h_t · (p − v) − R, with R the nodes' running cost a month (everything but capital); discounted
    at the monthly cost of capital (`finance.discounted_payback`).
    """
    capacity = as_floats(capacity_hours_per_month)[..., np.newaxis]
    campaign = as_floats(campaign_hours_by_month)
    demand = np.minimum(capacity, campaign + as_floats(background_utilisation)[..., np.newaxis] * capacity)
    margin = as_floats(rented_per_accelerator_hour) - as_floats(variable_per_accelerator_hour)
    saving = demand * margin[..., np.newaxis] - as_floats(running_per_month)[..., np.newaxis]
    rate = monthly_rate(cost_of_capital_annual)
    months = discounted_payback(investment=capex, inflows=saving, rate=rate)
    discounted = (saving * np.power(1.0 + as_floats(rate)[..., np.newaxis],
                                    -np.arange(1, saving.shape[-1] + 1))).sum(axis=-1)
    capex_array = as_floats(capex)
    never = np.asarray((saving <= 0.0).all(axis=-1))
    return Payback(
        months=np.where(np.isfinite(months), months, np.nan),
        recovered_fraction=discounted / np.where(capex_array > 0.0, capex_array, 1.0),
        demand_hours_per_month=demand.mean(axis=-1),
        saving_never_positive=never,
        reason=np.where(np.isfinite(months), "", np.where(never, NO_SAVING, BEYOND_LIFE)),
    )


def chargeback_curve(
    *, fixed_per_node_month: ArrayLike, accelerators_per_node: int, variable_per_accelerator_hour: ArrayLike,
    utilisations: ArrayLike = CURVE_UTILISATIONS,
) -> Floats:
    """c(u) on a grid of utilisations: (S, U) for S scenarios."""
    return chargeback_per_accelerator_hour(
        fixed_per_node_month=as_floats(fixed_per_node_month).reshape(-1, 1),
        accelerators_per_node=accelerators_per_node,
        variable_per_accelerator_hour=as_floats(variable_per_accelerator_hour).reshape(-1, 1),
        utilisation=as_floats(utilisations).reshape(1, -1),
    )
