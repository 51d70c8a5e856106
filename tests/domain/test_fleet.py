"""Fleet plans (model.md §10): checked against inventory theory, numpy-financial, and brute force
over every stage sequence."""

import itertools
from dataclasses import replace

import numpy as np
import numpy_financial as npf
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from service.domain.fleet import (
    FleetEconomics,
    FleetPlan,
    critical_ratio,
    discount_factors,
    monthly_demand,
    plan_fleet,
)
from service.domain.units import HOURS_PER_MONTH

# Demo figures (invented): an 8-accelerator node costing 11,668 a month, 0.067 of energy per busy
# accelerator-hour, rented at 4.10 per accelerator-hour, usable to 85%.
ECONOMICS = FleetEconomics(accelerators_per_node=8, fixed_per_node_month=11_668.0, variable_per_accelerator_hour=0.067,
                           rented_per_accelerator_hour=4.10, max_utilisation=0.85, monthly_rate=0.08 / 12)
USABLE_PER_NODE = 8 * HOURS_PER_MONTH * 0.85


def with_rent(price: float) -> FleetEconomics:
    e = ECONOMICS
    return FleetEconomics(e.accelerators_per_node, e.fixed_per_node_month, e.variable_per_accelerator_hour, price,
                          e.max_utilisation, e.monthly_rate)


def test_the_optimum_leaves_demand_above_capacity_with_the_critical_ratio_probability() -> None:
    # The newsvendor property (Arrow, Harris and Marschak 1951, "Optimal inventory policy",
    # Econometrica 19(3); any inventory-theory text): with stationary demand the best capacity q*
    # satisfies P(D > q*) = c_o / (p − v), the owned cost of a usable hour over the margin renting it
    # would cost. Fleet sizes on a fine grid (0.02 node) so the grid adds little error.
    rng = np.random.default_rng(11)
    demand = monthly_demand(first_month_hours=60_000, months=4, doubling_months=None, spread=0.3, samples=20_000,
                            generator=rng)
    plan = plan_fleet(sizes=np.arange(8.0, 16.0, 0.02), demand=demand, economics=ECONOMICS)
    capacity = plan.sizes[plan.best] * USABLE_PER_NODE
    shortfall = float((demand > capacity).mean())
    ratio = critical_ratio(ECONOMICS)
    # Sampling error of a proportion over 80,000 months is ~0.002; the 0.02-node grid moves the
    # capacity by ~100 h, about 0.003 in probability here: 0.01 covers both. (The optimum, near
    # 11.5 nodes, lies well inside the 8-16 grid.)
    assert abs(shortfall - ratio) < 0.01, (shortfall, ratio)


def test_certain_flat_demand_and_dear_rent_buy_the_fleet_that_just_covers_it() -> None:
    demand = np.full((1, 24), 2.5 * USABLE_PER_NODE)  # two and a half nodes' usable hours, every month
    plan = plan_fleet(sizes=np.arange(0, 10), demand=demand, economics=with_rent(1e4))
    assert plan.sizes[plan.best] == 3


def test_rent_below_the_owned_energy_cost_means_no_fleet() -> None:
    demand = np.full((1, 12), 50_000.0)
    plan = plan_fleet(sizes=np.arange(0, 20), demand=demand, economics=with_rent(0.05))
    assert plan.sizes[plan.best] == 0


@settings(max_examples=40, deadline=None)
@given(cheaper=st.floats(0.5, 20.0), dearer_by=st.floats(0.0, 20.0), seed=st.integers(0, 10_000))
def test_dearer_rent_never_shrinks_the_best_fleet(cheaper: float, dearer_by: float, seed: int) -> None:
    demand = monthly_demand(first_month_hours=40_000, months=12, doubling_months=12, spread=0.2, samples=200,
                            generator=np.random.default_rng(seed))
    sizes = np.arange(0, 60)
    low = plan_fleet(sizes=sizes, demand=demand, economics=with_rent(cheaper))
    high = plan_fleet(sizes=sizes, demand=demand, economics=with_rent(cheaper + dearer_by))
    assert high.sizes[high.best] >= low.sizes[low.best]


def test_renting_everything_is_discounted_as_numpy_financial_npv_with_nothing_paid_at_the_start() -> None:
    # numpy_financial.npv(rate, values) does not discount values[0]; months here are paid at their
    # end, so the present cost of renting everything is p · npv(r, [0, d_1, …, d_T]).
    demand = np.array([[1_000.0, 2_000.0, 4_000.0, 8_000.0]])
    plan = plan_fleet(sizes=np.array([0]), demand=demand, economics=ECONOMICS)
    expected = ECONOMICS.rented_per_accelerator_hour * npf.npv(ECONOMICS.monthly_rate, [0.0, *demand[0]])
    assert_allclose(plan.present_cost[0, 0], expected, rtol=1e-12)


def test_discount_factors_pay_each_month_at_its_end() -> None:
    assert_allclose(discount_factors(monthly_rate=0.01, months=3), [1 / 1.01, 1 / 1.01**2, 1 / 1.01**3], rtol=1e-15)


def test_an_owned_fleet_costs_its_fixed_charge_plus_energy_and_the_overflow_rent() -> None:
    # One month, certain demand of 6,000 h, one node of 4,964 usable hours: written out by hand.
    demand = np.array([[6_000.0]])
    plan = plan_fleet(sizes=np.array([1]), demand=demand, economics=ECONOMICS)
    owned = USABLE_PER_NODE
    month = 11_668.0 + 0.067 * owned + 4.10 * (6_000.0 - owned)
    assert_allclose(plan.present_cost[0, 0], month / (1 + 0.08 / 12), rtol=1e-12)
    assert_allclose(plan.months.owned_hours, [owned], rtol=1e-12)
    assert_allclose(plan.months.rented_hours, [6_000.0 - owned], rtol=1e-12)


def test_growing_demand_doubles_on_schedule_and_the_spread_keeps_its_mean() -> None:
    rng = np.random.default_rng(3)
    demand = monthly_demand(first_month_hours=1_000, months=25, doubling_months=12, spread=0.25, samples=50_000,
                            generator=rng)
    means = demand.mean(axis=0)
    # Lognormal with mu = −sigma²/2 has mean 1; the standard error of 50,000 draws is ~0.11%.
    assert_allclose(means[[0, 12, 24]], [1_000, 2_000, 4_000], rtol=0.01)


# Staged plans from today's fleet. Demo figures (invented): of the 11,668 a node costs a month,
# 3,994 is running cost; today's 32 nodes are owned; a retired node fetches 71,250; a new one costs
# 339,000.
OWNED = replace(ECONOMICS, running_per_node_month=3_994.0, nodes_owned=32, resale_per_node=71_250.0,
                capex_per_node=339_000.0)


def staged_plan(demand: np.ndarray, sizes: np.ndarray, economics: FleetEconomics = OWNED,
                every: int = 12) -> FleetPlan:
    return plan_fleet(sizes=sizes, demand=demand, economics=economics, decision_every_months=every)


def test_flat_demand_filling_todays_fleet_keeps_it_in_one_stage() -> None:
    demand = np.full((1, 48), 32 * USABLE_PER_NODE)
    plan = staged_plan(demand, np.arange(0, 97, 2))
    assert_allclose(plan.staged_nodes, [32, 32, 32, 32])
    assert plan.months.added.sum() == 0 and plan.months.retired.sum() == 0
    assert plan.sizes[plan.best] == 32
    # Staying put is the single purchase too: the two plans cost the same.
    assert_allclose(plan.staged_present_cost.mean(), plan.expected_present_cost[plan.best], rtol=1e-12)


def test_growing_demand_adds_nodes_at_later_decision_points_and_never_costs_more_than_one_purchase() -> None:
    demand = monthly_demand(first_month_hours=60_000, months=48, doubling_months=18, spread=0.25, samples=500,
                            generator=np.random.default_rng(7))
    plan = staged_plan(demand, np.arange(0, 97, 2))
    nodes = plan.staged_nodes
    assert np.all(np.diff(nodes) >= 0), nodes
    assert nodes[-1] > nodes[0]
    assert plan.months.added[12:].sum() > 0  # additions after the first decision point
    assert plan.staged_present_cost.mean() <= plan.expected_present_cost.min() + 1e-6


def test_an_idle_fleet_is_retired_for_its_resale_value() -> None:
    plan = staged_plan(np.zeros((1, 24)), np.arange(0, 41, 4))
    assert_allclose(plan.staged_nodes, [0, 0])
    assert plan.months.retired[0] == 32
    # Only the resale, received at the start: nothing is bought, run or rented.
    assert_allclose(plan.staged_present_cost, [-32 * 71_250.0], rtol=1e-12)


def test_the_cash_flow_less_the_bought_nodes_value_at_the_end_is_the_plans_present_cost() -> None:
    # Monthly cash: purchases and resale at the start of a stage (time m, as values[m]), running,
    # energy and rent at each month's end (values[t]); numpy_financial.npv discounts values[k] by
    # (1 + r)^-k. Less the bought nodes' outstanding annuity balance at the horizon's end, it is
    # the expected present cost the plan minimised.
    demand = monthly_demand(first_month_hours=80_000, months=36, doubling_months=12, spread=0.2, samples=300,
                            generator=np.random.default_rng(5))
    plan = staged_plan(demand, np.arange(0, 97, 4))
    m = plan.months
    values = np.zeros(37)
    values[:36] += m.purchases - m.resale
    values[1:] += m.running + m.energy + m.rent
    values[36] -= m.value_at_end
    assert m.added.sum() > 0
    assert_allclose(npf.npv(OWNED.monthly_rate, values), plan.staged_present_cost.mean(), rtol=1e-9)


def _brute_force(sizes: list[float], demand: np.ndarray, e: FleetEconomics, every: int) -> float:
    """The lowest expected present cost over every stage sequence, month by month in plain Python."""
    months = demand.shape[1]
    starts = list(range(0, months, every))
    usable = e.accelerators_per_node * HOURS_PER_MONTH * e.max_utilisation
    capital = e.fixed_per_node_month - (e.running_per_node_month or 0.0)
    best = np.inf
    for sequence in itertools.product(sizes, repeat=len(starts)):
        cost = np.zeros(demand.shape[0])
        held, bought = float(e.nodes_owned), 0.0
        for t in range(months):
            if t in starts:
                n = sequence[starts.index(t)]
                bought += max(n - held, 0.0)
                cost -= max(held - n, 0.0) * e.resale_per_node / (1 + e.monthly_rate) ** t
                held = n
            served = np.minimum(demand[:, t], held * usable)
            month = (bought * capital + held * (e.running_per_node_month or 0.0)
                     + e.variable_per_accelerator_hour * served
                     + e.rented_per_accelerator_hour * (demand[:, t] - served))
            cost += month / (1 + e.monthly_rate) ** (t + 1)
        best = min(best, float(cost.mean()))
    return best


@settings(max_examples=30, deadline=None)
# At most 4 sizes and 4 decision points: brute force tries up to 4⁴ sequences per example.
@given(sizes=st.lists(st.integers(0, 12), min_size=2, max_size=4, unique=True), owned=st.integers(0, 12),
       every=st.integers(2, 4), months=st.integers(1, 8), growth=st.floats(-0.3, 0.6),
       rent=st.floats(1.0, 12.0), resale=st.floats(0.0, 200_000.0), seed=st.integers(0, 1_000))
def test_the_staged_optimum_equals_brute_force_over_every_stage_sequence(
        sizes: list[int], owned: int, every: int, months: int, growth: float, rent: float, resale: float,
        seed: int) -> None:
    trend = 20_000.0 * np.exp(growth * np.arange(months))
    demand = trend * np.random.default_rng(seed).lognormal(0.0, 0.3, size=(4, months))
    economics = replace(OWNED, rented_per_accelerator_hour=rent, nodes_owned=owned, resale_per_node=resale)
    candidates = np.asarray(sorted(sizes), dtype=np.float64)
    plan = staged_plan(demand, candidates, economics, every)
    expected = _brute_force(candidates.tolist(), demand, economics, every)
    assert_allclose(plan.staged_present_cost.mean(), expected, rtol=1e-9)
