"""Fleet plans: how many nodes to own over a horizon of growing, uncertain demand, the overflow
rented (model.md §10). Every candidate size, every demand sample and every month in one array.

Each month t = 1…T an owned fleet of n nodes offers n·A·730·u_max usable accelerator-hours; it
serves min(demand, capacity) and the rest is rented. The month costs the running cost of the n
nodes (facility, maintenance, staff, idle energy), the capital charge of every node bought in the
plan (today's nodes are sunk), v·owned hours and p·rented hours, paid at the end of the month and
discounted to the start at the monthly cost of capital. The fleet may change at decision points;
the staged plan is the sequence of sizes with the lowest expected present cost (`plan_fleet`).
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
    fixed_per_node_month: float  # F: everything a node costs a month, its capital charge included
    variable_per_accelerator_hour: float  # v: busy energy of an owned accelerator-hour
    rented_per_accelerator_hour: float  # p, per owned-type accelerator-hour of work
    max_utilisation: float
    monthly_rate: float
    running_per_node_month: float | None = None  # F less the capital charge; None: all of F recurs
    nodes_owned: int = 0  # today's fleet: its capital is sunk
    resale_per_node: float = 0.0  # what a retired node fetches
    capex_per_node: float = 0.0  # what an added node costs when bought (cash flow only)

    @property
    def running(self) -> float:
        return self.fixed_per_node_month if self.running_per_node_month is None else self.running_per_node_month

    @property
    def capital(self) -> float:
        """The capital charge per node-month of a node bought in the plan."""
        return self.fixed_per_node_month - self.running


@dataclass(frozen=True)
class Stages:
    """When the fleet may change: decision months (0-based months elapsed) and which stage each
    month of the horizon belongs to."""

    starts: Ints  # (J,)
    of_month: Ints  # (T,)

    @property
    def count(self) -> int:
        return int(self.starts.size)


def decision_stages(*, months: int, every_months: int) -> Stages:
    starts = np.arange(0, months, every_months, dtype=np.int64)
    return Stages(starts=starts, of_month=np.arange(months, dtype=np.int64) // every_months)


@dataclass(frozen=True)
class MonthlyPlan:
    """The staged plan month by month (T,), expected over the demand samples. Amounts are paid at
    each month's end; purchases and resales at the start of the month they serve."""

    nodes: Floats
    added: Floats  # nodes bought at the start of the month
    retired: Floats  # nodes retired at the start of the month
    owned_hours: Floats
    rented_hours: Floats
    capacity_hours: Floats  # the fleet's hours at full use
    capital_charge: Floats  # the annuity of every node bought so far
    running: Floats  # running cost of the nodes held
    energy: Floats  # busy energy of the owned hours
    rent: Floats
    purchases: Floats  # cash paid for nodes bought at the start of the month
    resale: Floats  # cash received for nodes retired at the start of the month
    value_at_end: float  # the outstanding annuity balance of the bought nodes after the horizon

    @property
    def spend(self) -> Floats:
        """The month's cost as the plan counts it: capital charge, running, energy, rent, less resale."""
        return self.capital_charge + self.running + self.energy + self.rent - self.resale


@dataclass(frozen=True)
class FleetPlan:
    sizes: Floats  # (N,)
    stages: Stages
    present_cost: Floats  # (N, S): one purchase now, size n held over the horizon
    owned_hours: Floats  # (N,) expected owned accelerator-hours over the horizon
    rented_hours: Floats  # (N,) expected rented accelerator-hours (owned-type) over the horizon
    capacity_hours: Floats  # (N,)
    best: int  # index into sizes: the best single purchase
    staged: Ints  # (J,) index into sizes of the fleet in each stage
    staged_present_cost: Floats  # (S,)
    months: MonthlyPlan  # the staged plan, month by month

    @property
    def expected_present_cost(self) -> Floats:
        return np.asarray(self.present_cost.mean(axis=1))

    @property
    def staged_nodes(self) -> Floats:
        return np.asarray(self.sizes[self.staged])

    @property
    def probability_owning_beats_renting(self) -> float:
        """Share of demand samples in which the best fleet costs less than renting everything."""
        renting = self.present_cost[int(np.argmin(self.sizes))] if self.sizes.min() == 0 else None
        if renting is None:
            return float("nan")
        return float(np.mean(self.present_cost[self.best] < renting))


def plan_fleet(*, sizes: ArrayLike, demand: Floats, economics: FleetEconomics,
               decision_every_months: int | None = None) -> FleetPlan:
    """Present cost of every fleet size against every demand sample when bought now and held, and
    the staged plan: the fleet size in each stage between decision points that minimises the
    expected present cost, starting from the nodes owned today.

    A month with n nodes costs n·R (running: facility, maintenance, staff, idle energy) + v·owned
    hours + p·rented hours, discounted at the end of the month; each node bought at decision month
    m adds the capital charge K = F − R for every month left in the horizon, and each node retired
    returns its resale value at m. Today's nodes carry no capital charge: their capital is sunk.
    Served hours min(d_st, c_n) are the only (sizes × samples × months) term, contracted against
    the discount factors of each stage in chunks of sizes.

    The stage sequence is found exactly by dynamic programming (Bellman 1957, Dynamic
    Programming, Princeton University Press: the principle of optimality): the stage costs are expectations over demand
    samples whose monthly noise is independent of the past, so the fleet held in a stage affects
    later stages only through the size carried over, and the backward recursion
    V_j(a) = min_b [move_j(a, b) + E_j(b) + V_{j+1}(b)] over candidate sizes a, b is exact.
    """
    e = economics
    size = as_floats(sizes)
    samples, months = demand.shape
    stages = decision_stages(months=months, every_months=decision_every_months or months)
    delta = discount_factors(monthly_rate=e.monthly_rate, months=months)
    weights = np.zeros((months, stages.count))
    weights[np.arange(months), stages.of_month] = delta  # (T, J): each month's discount in its stage
    capacity = size * e.accelerators_per_node * HOURS_PER_MONTH * e.max_utilisation  # (N,)
    margin = e.rented_per_accelerator_hour - e.variable_per_accelerator_hour
    served_pv = np.empty((size.size, samples, stages.count))
    served_hours = np.empty(size.size)
    step = max(1, SIZE_CHUNK_ELEMENTS // max(1, samples * months))
    for start in range(0, size.size, step):  # chunks of sizes, not a loop per scenario
        served = np.minimum(demand[None, :, :], capacity[start:start + step, None, None])  # (n, S, T)
        served_pv[start:start + step] = served @ weights
        served_hours[start:start + step] = served.sum(axis=2).mean(axis=1)
    # Per (size, sample, stage): running cost of the fleet + renting all demand − what owning saves.
    stage_cost = (size[:, None, None] * (e.running * weights.sum(axis=0))[None, None, :]
                  + (e.rented_per_accelerator_hour * (demand @ weights))[None, :, :] - margin * served_pv)
    # Buying at a decision month pays the capital charge to the horizon's end; retiring returns resale.
    capital_to_end = e.capital * np.cumsum(delta[::-1])[::-1][stages.starts]  # (J,)
    resale_at = e.resale_per_node * np.power(1.0 + e.monthly_rate, -stages.starts.astype(np.float64))
    start_move = _move(float(e.nodes_owned), size, capital_to_end[0], resale_at[0])  # (N,)
    present = start_move[:, None] + stage_cost.sum(axis=2)
    best = int(np.argmin(present.mean(axis=1)))
    staged = _best_stages(size, stage_cost.mean(axis=1), start_move, capital_to_end, resale_at)
    nodes = size[staged]
    moves = _move(np.concatenate([[float(e.nodes_owned)], nodes[:-1]]), nodes, capital_to_end, resale_at)
    staged_cost = moves.sum() + stage_cost[staged, :, np.arange(stages.count)].sum(axis=0)  # (S,)
    total_demand = demand.sum(axis=1).mean()
    return FleetPlan(
        sizes=size, stages=stages, present_cost=present, owned_hours=served_hours,
        rented_hours=total_demand - served_hours, capacity_hours=capacity * months / e.max_utilisation, best=best,
        staged=staged, staged_present_cost=staged_cost,
        months=_monthly(nodes, stages, demand, e))


def _move(before: ArrayLike, after: ArrayLike, capital_to_end: ArrayLike, resale: ArrayLike) -> Floats:
    """The cost of changing the fleet from `before` to `after` at a decision point: the capital
    charge to the horizon's end of each node bought, less the resale value of each node retired."""
    change = as_floats(after) - as_floats(before)
    return np.asarray(np.maximum(change, 0.0) * capital_to_end - np.maximum(-change, 0.0) * resale)


def _best_stages(size: Floats, expected: Floats, start_move: Floats, capital_to_end: Floats,
                 resale_at: Floats) -> Ints:
    """Indices into `size` of the fleet in each stage, minimising start move + Σ_j (E_j + move_j)
    by backward recursion over the stages (expected: (N, J)); each stage is one (N, N) array."""
    count = expected.shape[1]
    to_go = np.zeros(size.size)  # V_J = 0
    choices = []
    for j in range(count - 1, 0, -1):  # stages, not sizes or samples
        moves = _move(size[:, None], size[None, :], capital_to_end[j], resale_at[j])  # (from, to)
        total = moves + (expected[:, j] + to_go)[None, :]
        choice = np.argmin(total, axis=1)
        choices.append(choice)
        to_go = total[np.arange(size.size), choice]
    sequence = [int(np.argmin(start_move + expected[:, 0] + to_go))]
    for choice in reversed(choices):
        sequence.append(int(choice[sequence[-1]]))
    return np.asarray(sequence, dtype=np.int64)


def _monthly(nodes: Floats, stages: Stages, demand: Floats, e: FleetEconomics) -> MonthlyPlan:
    months = demand.shape[1]
    held = nodes[stages.of_month]  # (T,)
    before = np.concatenate([[float(e.nodes_owned)], nodes[:-1]])
    added = np.zeros(months)
    retired = np.zeros(months)
    added[stages.starts] = np.maximum(nodes - before, 0.0)
    retired[stages.starts] = np.maximum(before - nodes, 0.0)
    capacity = held * e.accelerators_per_node * HOURS_PER_MONTH
    served = np.minimum(demand, capacity * e.max_utilisation)  # (S, T)
    owned = served.mean(axis=0)
    rented = demand.mean(axis=0) - owned
    bought = np.cumsum(added)
    rate = e.monthly_rate
    age = months - stages.starts.astype(np.float64)  # months each stage's purchases are charged
    growth = np.power(1.0 + rate, age)
    paid_off = e.capital * (age if rate == 0 else (growth - 1.0) / rate)
    balance = e.capex_per_node * growth - paid_off  # outstanding after the horizon, per node
    return MonthlyPlan(
        nodes=held, added=added, retired=retired, owned_hours=owned, rented_hours=rented,
        capacity_hours=capacity, capital_charge=e.capital * bought, running=e.running * held,
        energy=e.variable_per_accelerator_hour * owned, rent=e.rented_per_accelerator_hour * rented,
        purchases=e.capex_per_node * added, resale=e.resale_per_node * retired,
        value_at_end=float(np.dot(added[stages.starts], balance)))


def critical_ratio(economics: FleetEconomics) -> float:
    """The newsvendor critical fractile for one usable owned accelerator-hour: the chance of
    demand exceeding the optimal capacity equals owned cost per usable hour / (p − v)
    (Arrow, Harris and Marschak 1951; any inventory-theory text)."""
    e = economics
    owned_per_usable_hour = e.fixed_per_node_month / (e.accelerators_per_node * HOURS_PER_MONTH * e.max_utilisation)
    return owned_per_usable_hour / (e.rented_per_accelerator_hour - e.variable_per_accelerator_hour)


def sizes_between(*, low: int, high: int, step: int) -> Ints:
    return np.arange(low, high + 1, step, dtype=np.int64)
