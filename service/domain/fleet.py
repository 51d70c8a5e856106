"""Fleet plans: how many nodes to own over a horizon of growing, uncertain demand, the overflow
rented (model.md §10). Every candidate size, every demand sample and every month in one array.

Each month t = 1…T an owned fleet of n nodes offers n·A·730·u_max usable accelerator-hours; it
serves min(demand, capacity) and the rest is rented. The month costs n·F (the fleet's fixed cost:
capital, facility, maintenance, staff, idle energy) + v·owned hours + p·rented hours, and is
discounted to the start at the monthly cost of capital, paid at the end of each month.
"""

from dataclasses import dataclass

import numpy as np

from service.domain.arrays import ArrayLike, Floats, Ints, as_floats
from service.domain.units import HOURS_PER_MONTH

SIZE_CHUNK_ELEMENTS = 4_000_000  # sizes × samples × months evaluated at once: bounds memory


def monthly_demand(*, first_month_hours: float, months: int, doubling_months: float | None, spread: float,
                   samples: int, generator: np.random.Generator) -> Floats:
    """Accelerator-hours demanded each month, (samples, months): d(t) = d0 · 2^(t/doubling) times a
    lognormal factor per month with sigma `spread` and mean 1 (so the spread adds risk, not demand).
    No doubling time means flat demand."""
    t = np.arange(months, dtype=np.float64)
    trend = first_month_hours * (np.ones(months) if doubling_months is None else np.exp2(t / doubling_months))
    if spread == 0.0:
        return np.broadcast_to(trend, (samples, months)).copy()
    noise = generator.lognormal(-0.5 * spread**2, spread, size=(samples, months))
    return trend * noise


def discount_factors(*, monthly_rate: float, months: int) -> Floats:
    """1/(1+r)^t for t = 1…T: each month's cost is paid at its end."""
    return np.power(1.0 + monthly_rate, -np.arange(1, months + 1, dtype=np.float64))


@dataclass(frozen=True)
class FleetEconomics:
    accelerators_per_node: int
    fixed_per_node_month: float  # F
    variable_per_accelerator_hour: float  # v: busy energy of an owned accelerator-hour
    rented_per_accelerator_hour: float  # p, per owned-type accelerator-hour of work
    max_utilisation: float
    monthly_rate: float


@dataclass(frozen=True)
class FleetPlan:
    sizes: Floats  # (N,)
    present_cost: Floats  # (N, S)
    owned_hours: Floats  # (N,) expected owned accelerator-hours over the horizon
    rented_hours: Floats  # (N,) expected rented accelerator-hours (owned-type) over the horizon
    capacity_hours: Floats  # (N,)
    best: int  # index into sizes
    months_owned: Floats  # (T,) expected, for the best size
    months_rented: Floats
    months_spend: Floats
    months_capacity: float

    @property
    def expected_present_cost(self) -> Floats:
        return np.asarray(self.present_cost.mean(axis=1))

    @property
    def probability_owning_beats_renting(self) -> float:
        """Share of demand samples in which the best fleet costs less than renting everything."""
        renting = self.present_cost[int(np.argmin(self.sizes))] if self.sizes.min() == 0 else None
        if renting is None:
            return float("nan")
        return float(np.mean(self.present_cost[self.best] < renting))


def plan_fleet(*, sizes: ArrayLike, demand: Floats, economics: FleetEconomics) -> FleetPlan:
    """Present cost of every fleet size against every demand sample, and the month-by-month plan of
    the size with the lowest expected present cost.

    PV(n, s) = Σ_t δ_t · [n·F + p·d_st − (p − v)·min(d_st, c_n)], with c_n the usable capacity and
    δ_t the discount factor: the only (sizes × samples × months) term is the served demand, summed
    against δ as one tensor contraction, in chunks of sizes to bound memory.
    """
    e = economics
    size = as_floats(sizes)
    samples, months = demand.shape
    delta = discount_factors(monthly_rate=e.monthly_rate, months=months)
    capacity = size * e.accelerators_per_node * HOURS_PER_MONTH * e.max_utilisation  # (N,)
    fixed = size[:, None] * e.fixed_per_node_month * delta.sum()  # (N, 1)
    rented_all = e.rented_per_accelerator_hour * (demand @ delta)  # (S,)
    served_pv = np.empty((size.size, samples))
    served_hours = np.empty(size.size)
    step = max(1, SIZE_CHUNK_ELEMENTS // max(1, samples * months))
    for start in range(0, size.size, step):  # chunks of sizes, not a loop per scenario
        cap = capacity[start:start + step, None, None]
        served = np.minimum(demand[None, :, :], cap)  # (n, S, T)
        served_pv[start:start + step] = served @ delta
        served_hours[start:start + step] = served.sum(axis=2).mean(axis=1)
    margin = e.rented_per_accelerator_hour - e.variable_per_accelerator_hour
    present = fixed + rented_all[None, :] - margin * served_pv
    best = int(np.argmin(present.mean(axis=1)))
    served_best = np.minimum(demand, capacity[best])  # (S, T)
    owned_month = served_best.mean(axis=0)
    rented_month = (demand - served_best).mean(axis=0)
    spend = (size[best] * e.fixed_per_node_month + e.variable_per_accelerator_hour * owned_month
             + e.rented_per_accelerator_hour * rented_month)
    total_demand = demand.sum(axis=1).mean()
    return FleetPlan(
        sizes=size, present_cost=present, owned_hours=served_hours, rented_hours=total_demand - served_hours,
        capacity_hours=capacity * months / e.max_utilisation, best=best, months_owned=owned_month,
        months_rented=rented_month, months_spend=spend,
        months_capacity=float(capacity[best] / e.max_utilisation))


def critical_ratio(economics: FleetEconomics) -> float:
    """The newsvendor critical fractile for one usable owned accelerator-hour: the chance of
    demand exceeding the optimal capacity equals owned cost per usable hour / (p − v)
    (Arrow, Harris and Marschak 1951; any inventory-theory text)."""
    e = economics
    owned_per_usable_hour = e.fixed_per_node_month / (e.accelerators_per_node * HOURS_PER_MONTH * e.max_utilisation)
    return owned_per_usable_hour / (e.rented_per_accelerator_hour - e.variable_per_accelerator_hour)


def sizes_between(*, low: int, high: int, step: int) -> Ints:
    return np.arange(low, high + 1, step, dtype=np.int64)
