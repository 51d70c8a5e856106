"""Properties the core must keep for any inputs, and one sweep that must equal its single quotes.

All figures here are demo data (invented ids and prices); nothing is a published check value.
"""

import numpy as np
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from service.domain.campaign import Campaign, LayoutPins, Overrides, QuoteOptions, TransformerWork
from service.domain.catalog import (
    Accelerator,
    Catalog,
    Colocation,
    CommittedTerm,
    InterruptibleTerm,
    NodeCapex,
    NodeType,
    Offer,
    OwnedHall,
    Site,
)
from service.domain.evaluate import evaluate_campaign
from service.domain.reliability import daly_interval, expected_wall_fraction, job_mtbi_seconds
from service.domain.units import SECONDS_PER_HOUR
from tests.domain.builders import SEVEN_B_SHAPE, hardware, load, whole

# No example database on disk, and no timing deadline: the engine's first call may be slow.
PROPERTY = settings(database=None, deadline=None, max_examples=150)


def one(value: float) -> np.ndarray:
    return np.array([value])


@PROPERTY
@given(
    parameters=st.floats(1e8, 2e11),
    tokens=st.floats(1e8, 2e12),
    runs=st.floats(1.0, 5.0),
    sustained_tflops=st.floats(10.0, 2000.0),
    network_gbps=st.floats(1.0, 3200.0),
    node_mtbf_hours=st.one_of(st.just(np.inf), st.floats(100.0, 1e6)),
    max_nodes=st.integers(1, 128),
    deadline_days=st.one_of(st.just(np.inf), st.floats(0.5, 400.0)),
)
def test_accelerator_hours_never_fall_below_the_ideal_in_any_candidate_layout(
    parameters: float, tokens: float, runs: float, sustained_tflops: float, network_gbps: float,
    node_mtbf_hours: float, max_nodes: int, deadline_days: float,
) -> None:
    run = load(parameters=one(parameters), tokens=one(tokens), runs_multiplier=one(runs),
               architecture=SEVEN_B_SHAPE, deadline_seconds=one(deadline_days * 86400.0))
    venue = hardware(sustained_flops_per_accelerator=one(sustained_tflops * 1e12), network_gbps=one(network_gbps),
                     node_mtbf_hours=one(node_mtbf_hours))
    grid, _ = whole(run, venue, node_limits=[float(max_nodes)])
    ideal = 6.0 * parameters * tokens * runs / (sustained_tflops * 1e12) / SECONDS_PER_HOUR
    assert np.all(grid.accelerator_hours >= ideal * (1.0 - 1e-12))


@PROPERTY
@given(
    parameters=st.floats(1e8, 2e11),
    nodes=st.integers(2, 512),
    sustained_tflops=st.floats(10.0, 2000.0),
    network_gbps=st.floats(1.0, 3200.0),
    faster=st.floats(1.0, 100.0),
    tensor=st.sampled_from([1, 2, 8]),
    pipeline=st.sampled_from([1, 2, 4]),
    zero_stage=st.sampled_from([0, 1, 3]),
)
def test_more_network_bandwidth_never_lowers_scaling_efficiency(
    parameters: float, nodes: int, sustained_tflops: float, network_gbps: float, faster: float,
    tensor: int, pipeline: int, zero_stage: int,
) -> None:
    pins = LayoutPins(tensor=tensor, pipeline=pipeline, zero_stage=zero_stage if pipeline == 1 else min(zero_stage, 1))
    run = load(parameters=np.full(2, parameters), tokens=np.full(2, 1e11), runs_multiplier=np.ones(2),
               global_batch_tokens=np.full(2, 8e6), architecture=SEVEN_B_SHAPE, pins=pins,
               deadline_seconds=np.full(2, np.inf))
    venue = hardware(sustained_flops_per_accelerator=np.full(2, sustained_tflops * 1e12),
                     network_gbps=np.array([network_gbps, network_gbps * faster]))
    grid, _ = whole(run, venue, node_limits=[float(nodes)], fixed_accelerators=8 * nodes)
    assert np.all(grid.scaling_efficiency[1] >= grid.scaling_efficiency[0] * (1.0 - 1e-12))


@PROPERTY
@given(
    node_mtbf_hours=st.floats(10.0, 1e6),
    longer=st.floats(1.0, 1000.0),
    nodes=st.integers(1, 4096),
    checkpoint_seconds=st.floats(1.0, 3600.0),
    restart_seconds=st.floats(0.0, 3600.0),
)
def test_a_longer_mtbf_never_raises_the_failure_overhead(
    node_mtbf_hours: float, longer: float, nodes: int, checkpoint_seconds: float,
    restart_seconds: float,
) -> None:
    mtbi = job_mtbi_seconds(nodes=float(nodes),
                            node_mtbf_hours=np.array([node_mtbf_hours, node_mtbf_hours * longer]),
                            interruption_mean_hours=np.inf)
    # Daly's interval switches from its series to τ = M at δ = 2M, and the switch itself can
    # raise the overhead slightly (see the strict xfail in test_reliability.py). The property is
    # held on each side of the switch.
    assume(bool(checkpoint_seconds < 2.0 * mtbi[0]) == bool(checkpoint_seconds < 2.0 * mtbi[1]))
    tau = daly_interval(checkpoint_seconds=checkpoint_seconds, mtbi_seconds=mtbi)
    overhead = expected_wall_fraction(interval_seconds=tau, checkpoint_seconds=checkpoint_seconds,
                                      restart_seconds=restart_seconds, mtbi_seconds=mtbi) - 1.0
    assert overhead[1] <= overhead[0] * (1.0 + 1e-12)


# ---- one sweep of many scenarios equals as many single evaluations --------------------------

ACCELERATOR = Accelerator("demo-acc", memory_gb=80.0, peak_tflops={"bf16": 400.0}, utilisation=0.4)
NODE = NodeType("demo-node", ACCELERATOR, accelerators_per_node=8, intra_node_gbps=3600.0,
                network_gbps=400.0, power_kw_peak=10.0, power_kw_idle=2.5,
                checkpoint_write_gbps=40.0, mtbf_hours=20_000.0)


def _site(site_id: str, facility: Colocation | OwnedHall) -> Site:
    return Site(
        id=site_id, jurisdiction="NO", node_type=NODE, nodes_owned=16, nodes_max=32,
        network_path="rdma", capex=NodeCapex(300_000.0, 30_000.0, 10_000.0, 5_000.0),
        depreciation_months=48, residual_fraction=0.1, maintenance_fraction_per_year=0.06,
        staff_cost_per_node_year=9_000.0, facility=facility, pue=1.2,
        electricity_price_per_kwh=0.08, grid_kgco2e_per_kwh=0.05, utilisation_planned=0.7,
        utilisation_current=0.5, power_capacity_kw=600.0, cooling_capacity_kw=500.0,
    )


DEMO_CATALOG = Catalog(
    name="demo", currency="EUR", cost_of_capital_annual=0.07,
    accelerators={ACCELERATOR.id: ACCELERATOR}, node_types={NODE.id: NODE},
    sites=(
        _site("demo-colo", Colocation(price_per_kw_month=150.0)),
        _site("demo-hall", OwnedHall(capex_per_kw=9_000.0, life_years=15.0,
                                     fixed_cost_per_year=200_000.0)),
    ),
    offers=(
        Offer(
            id="demo-offer", provider="demo-provider", region="demo-region", jurisdiction="SE",
            node_type=NODE, nodes_max=24, network_path="direct",
            on_demand_per_accelerator_hour=3.5,
            committed=(CommittedTerm(12, 2.4), CommittedTerm(36, 1.8, upfront_fraction=0.5)),
            interruptible=InterruptibleTerm(1.4, mean_hours_between_interruptions=400.0),
            storage_per_gb_month=0.02, ingress_per_gb=0.01, egress_per_gb=0.05,
        ),
    ),
)


def _campaign(tokens: float | np.ndarray, deadline_days: float | np.ndarray) -> Campaign:
    return Campaign(name="demo campaign", team="demo team",
                    work=TransformerWork(parameters=7e9, tokens=tokens), deadline_days=deadline_days)


def test_one_call_over_a_thousand_scenarios_equals_a_thousand_single_calls() -> None:
    rng = np.random.default_rng(7)
    tokens = rng.uniform(5e10, 2e12, 1000)
    utilisation = rng.uniform(0.25, 0.6, 1000)
    # Deadlines from 2 to 60 days make the chosen node count differ from scenario to scenario.
    deadline_days = rng.uniform(2.0, 60.0, 1000)
    options = QuoteOptions()
    sweep = evaluate_campaign(DEMO_CATALOG, _campaign(tokens, deadline_days), options,
                              Overrides(utilisation=utilisation))
    assert len(sweep.options) == 2 * 2 + 4  # 2 sites × 2 owned terms; on demand, 2 committed, interruptible
    singles = [
        evaluate_campaign(DEMO_CATALOG, _campaign(tokens[i], deadline_days[i]), options,
                          Overrides(utilisation=utilisation[i]))
        for i in range(tokens.size)
    ]
    for k, option in enumerate(sweep.options):
        assert all(single.options[k].label == option.label for single in singles)
        for figure in ("total", "wall_seconds", "accelerator_hours"):
            expected = np.concatenate([_figure(single.options[k], figure) for single in singles])
            assert_allclose(_figure(option, figure), expected, rtol=1e-12, err_msg=f"{option.label} {figure}")


def _figure(option: object, name: str) -> np.ndarray:
    if name == "total":
        return np.atleast_1d(option.total)  # type: ignore[attr-defined]
    return np.atleast_1d(getattr(option.layout, name))  # type: ignore[attr-defined]
