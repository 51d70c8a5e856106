"""Break-even: the utilisation, demand and months at which owning beats renting (model.md §8)."""

from dataclasses import dataclass

import numpy as np

from service.domain.arrays import ArrayLike, Floats, as_floats
from service.domain.owning import chargeback_per_accelerator_hour
from service.domain.units import HOURS_PER_MONTH, HOURS_PER_YEAR

CURVE_UTILISATIONS = np.round(np.linspace(0.05, 1.0, 20), 2)

NO_MARGIN = "rent_below_owned_energy"
ABOVE_FULL_USE = "needs_more_than_full_utilisation"
NO_SAVING = "rent_never_covers_running_cost"
BEYOND_LIFE = "beyond_depreciation_life"


@dataclass(frozen=True)
class BreakEven:
    """One owned site against one rented price; NaN where there is no break-even (see the reasons)."""

    utilisation: Floats
    utilisation_unbounded: Floats
    accelerator_hours_per_year: Floats
    campaigns_per_year: Floats
    payback_months: Floats  # NaN beyond the depreciation life
    payback_months_unbounded: Floats  # inf when renting never saves the running cost

    # The reasons are words for people: sweeps never read them, so they are made on demand.
    @property
    def utilisation_reason(self) -> np.ndarray:
        """A code where there is no break-even utilisation, "" where there is one."""
        u = self.utilisation_unbounded
        return np.where(np.isfinite(u), np.where(u <= 1.0, "", ABOVE_FULL_USE), NO_MARGIN)

    @property
    def payback_reason(self) -> np.ndarray:
        months = self.payback_months_unbounded
        return np.where(np.isfinite(months), np.where(np.isnan(self.payback_months), BEYOND_LIFE, ""), NO_SAVING)


def breakeven_utilisation(
    *, fixed_per_node_month: ArrayLike, accelerators_per_node: ArrayLike,
    variable_per_accelerator_hour: ArrayLike, rented_per_accelerator_hour: ArrayLike,
) -> Floats:
    """u* = F / (A · 730 · (p − v)): where c(u) meets the rented price p; inf when p ≤ v."""
    margin = as_floats(rented_per_accelerator_hour) - as_floats(variable_per_accelerator_hour)
    safe = np.where(margin > 0.0, margin, 1.0)
    value = as_floats(fixed_per_node_month) / (as_floats(accelerators_per_node) * HOURS_PER_MONTH * safe)
    return np.where(margin > 0.0, value, np.inf)


def payback_months(
    *, capex: ArrayLike, running_per_month: ArrayLike, demand_hours_per_month: ArrayLike,
    rented_per_accelerator_hour: ArrayLike, variable_per_accelerator_hour: ArrayLike,
) -> Floats:
    """Months until the rent saved on a recurring demand repays the capex: the first month m in
    which m · (h·(p − v) − R) ≥ capex, with R the owned running cost a month; inf without saving."""
    saving = as_floats(demand_hours_per_month) * (
        as_floats(rented_per_accelerator_hour) - as_floats(variable_per_accelerator_hour)
    ) - as_floats(running_per_month)
    safe = np.where(saving > 0.0, saving, 1.0)
    return np.where(saving > 0.0, np.ceil(as_floats(capex) / safe - 1e-9), np.inf)


def break_even(
    *, fixed_per_node_month: ArrayLike, running_per_node_month: ArrayLike, capex_per_node: ArrayLike,
    accelerators_per_node: int, variable_per_accelerator_hour: ArrayLike,
    rented_per_accelerator_hour: ArrayLike, fleet_nodes: ArrayLike, campaign_accelerator_hours: ArrayLike,
    demand_hours_per_year: ArrayLike, new_nodes: ArrayLike, depreciation_months: float,
) -> BreakEven:
    """Break-even utilisation and demand of a fleet of `fleet_nodes`, and the payback of buying
    `new_nodes` for the campaign's recurring demand (capped by what those nodes can serve)."""
    u = breakeven_utilisation(
        fixed_per_node_month=fixed_per_node_month, accelerators_per_node=accelerators_per_node,
        variable_per_accelerator_hour=variable_per_accelerator_hour,
        rented_per_accelerator_hour=rented_per_accelerator_hour)
    reachable = u <= 1.0
    hours = np.where(reachable, u * accelerators_per_node * as_floats(fleet_nodes) * HOURS_PER_YEAR, np.nan)
    capacity_per_month = as_floats(new_nodes) * accelerators_per_node * HOURS_PER_MONTH
    demand = np.minimum(as_floats(demand_hours_per_year) / 12.0, capacity_per_month)
    months = payback_months(
        capex=as_floats(capex_per_node) * as_floats(new_nodes),
        running_per_month=as_floats(running_per_node_month) * as_floats(new_nodes),
        demand_hours_per_month=demand, rented_per_accelerator_hour=rented_per_accelerator_hour,
        variable_per_accelerator_hour=variable_per_accelerator_hour)
    within = months <= depreciation_months
    return BreakEven(
        utilisation=np.where(reachable, u, np.nan),
        utilisation_unbounded=u,
        accelerator_hours_per_year=hours,
        campaigns_per_year=hours / as_floats(campaign_accelerator_hours),
        payback_months=np.where(within, months, np.nan),
        payback_months_unbounded=months,
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
