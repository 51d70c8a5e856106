"""Owning and renting costs checked against hand computations written out from their inputs.

Sources: the annuity against numpy-financial's `pmt` (the oracle named in model.md §6); PUE as
total facility energy over IT equipment energy (ISO/IEC 30134-2:2016, "Power usage effectiveness
(PUE)", the PUE definition; clause number not confirmed, from memory); the ton of refrigeration
as 12,000 Btu_IT/h with 1 Btu_IT/h = 0.2930711 W (Thompson and Taylor 2008, NIST SP 811, "Guide
for the Use of the International System of Units", App. B.8; secondary, as model.md §6 gives it).
The catalog below is demo data with round invented figures; every expected value is computed in
this file from it.
"""

import copy
from typing import Any

import numpy as np
import numpy_financial as npf
import pytest
from numpy.testing import assert_allclose

from service.contract.catalog import CatalogIn
from service.contract.request import QuoteRequestIn
from service.domain import screens
from service.domain.campaign import Overrides
from service.domain.evaluate import CampaignEvaluation, OptionResult, evaluate_campaign
from service.domain.owning import cooling_tons, node_month
from service.domain.terms import upfront_financing_factor
from service.domain.venues import site_economics
from service.usecases.quoting import quote

RTOL = 1e-12

CATALOG: dict[str, Any] = {
    "name": "test-catalog", "currency": "EUR", "finance": {"cost_of_capital_annual": 0.06},
    "accelerators": [{"id": "test-acc", "memory_gb": 80, "peak_tflops": {"bf16": 100}, "utilisation": 0.5}],
    "node_types": [{"id": "test-node", "accelerator": "test-acc", "accelerators_per_node": 4,
                    "intra_node_gbps": 1000, "network_gbps": 200, "power_kw_peak": 6.0,
                    "power_kw_idle": 1.5, "checkpoint_write_gbps": 10}],
    "sites": [{"id": "test-site", "jurisdiction": "DE", "node_type": "test-node",
               "nodes_owned": 20, "nodes_max": 40,
               "capex": {"node_price": 200000, "network_per_node": 20000, "storage_per_node": 8000,
                         "install_per_node": 2000},
               "depreciation_months": 60, "residual_fraction": 0.10,
               "maintenance_fraction_per_year": 0.05, "staff_cost_per_node_year": 6000,
               "facility": {"kind": "colocation", "price_per_kw_month": 150},
               "pue": 1.2, "electricity_price_per_kwh": 0.10, "grid_kgco2e_per_kwh": 0.25,
               "power_capacity_kw": 300, "cooling_capacity_kw": 250,
               "utilisation_planned": 0.8, "utilisation_current": 0.5}],
    "offers": [{"id": "test-offer", "provider": "test-provider", "region": "test-region",
                "jurisdiction": "DE", "node_type": "test-node", "nodes_max": 64,
                "on_demand_per_accelerator_hour": 3.0,
                "committed": [{"months": 12, "per_accelerator_hour": 2.0, "upfront_fraction": 0.0},
                              {"months": 36, "per_accelerator_hour": 1.5, "upfront_fraction": 0.5}],
                "storage_per_gb_month": 0.02, "ingress_per_gb": 0.01, "egress_per_gb": 0.05,
                "pue": 1.1, "grid_kgco2e_per_kwh": 0.3}],
}

# The campaign: 16 accelerators pinned (4 nodes of 4), FLOPs given without parameters, so no
# memory limit and no communication; the node type has no MTBF, so no failure overhead.
ACCELERATORS, NODES, PER_NODE = 16, 4, 4
SUSTAINED_FLOPS = 100e12 * 0.5  # peak bf16 × utilisation
WALL_HOURS = 500.0
TOTAL_FLOPS = ACCELERATORS * SUSTAINED_FLOPS * 3600 * WALL_HOURS
ACCELERATOR_HOURS = ACCELERATORS * WALL_HOURS  # 8000
DATA = {"dataset_tb": 10, "checkpoint_tb": 0.5, "checkpoints_kept": 3, "results_egress_tb": 0.2}

# Owned site, per node-month (model.md §6).
CAPEX = 200000 + 20000 + 8000 + 2000
RATE = 0.06 / 12
CAPITAL = -npf.pmt(RATE, 60, CAPEX, -0.10 * CAPEX)  # repays capex less the discounted residual
FACILITY = 150 * 6.0  # colocation price per kW-month × node peak kW
MAINTENANCE = 0.05 * CAPEX / 12
STAFF = 6000 / 12
IDLE_ENERGY = 1.5 * 730 * 1.2 * 0.10  # idle kW × 730 h × PUE × price
F = CAPITAL + FACILITY + MAINTENANCE + STAFF + IDLE_ENERGY
V = (6.0 - 1.5) * 1.0 / PER_NODE * 1.2 * 0.10  # (peak − idle) × busy load / per node × PUE × price


def c(u: float) -> float:
    return F / (PER_NODE * 730 * u) + V


def evaluate(*, flops: float = TOTAL_FLOPS, recurrence: dict[str, float] | None = None,
             catalog: dict[str, Any] | None = None, extra_work: dict[str, Any] | None = None,
             fixed: int | None = ACCELERATORS) -> CampaignEvaluation:
    campaign: dict[str, Any] = {"name": "test-campaign", "team": "test-team", "data": DATA,
                                "work": {"kind": "flops", "total_flops": flops, **(extra_work or {})}}
    if recurrence:
        campaign["recurrence"] = recurrence
    request = QuoteRequestIn.model_validate({"campaign": campaign, "options": {"fixed_accelerators": fixed}})
    domain_catalog = CatalogIn.model_validate(catalog or CATALOG).to_domain()
    return evaluate_campaign(domain_catalog, *request.to_domain())


def option(evaluation: CampaignEvaluation, venue: str, term: str) -> OptionResult:
    return next(o for o in evaluation.options if o.venue_id == venue and o.term == term)


def test_the_worked_campaign_runs_16_accelerators_for_500_hours():
    o = option(evaluate(), "test-offer", "on_demand")
    assert (o.layout.nodes[0], o.layout.accelerators[0]) == (NODES, ACCELERATORS)
    assert_allclose(o.layout.wall_seconds / 3600, WALL_HOURS, rtol=RTOL)
    assert_allclose(o.layout.accelerator_hours, ACCELERATOR_HOURS, rtol=RTOL)
    assert_allclose(o.layout.failure_overhead, 0.0, atol=1e-15)


def test_a_colocation_node_month_is_capital_facility_maintenance_staff_and_idle_energy():
    domain_catalog = CatalogIn.model_validate(CATALOG).to_domain()
    economics = site_economics(domain_catalog.sites[0], domain_catalog, Overrides())
    assert_allclose(economics.capex_per_node, 230000.0, rtol=RTOL)
    month = node_month(economics)
    assert_allclose(month.capital, CAPITAL, rtol=RTOL)
    assert_allclose(month.facility, 900.0, rtol=RTOL)
    assert_allclose(month.maintenance, 958.3333333333334, rtol=RTOL)
    assert_allclose(month.staff, 500.0, rtol=RTOL)
    assert_allclose(month.idle_energy, 131.4, rtol=RTOL)
    assert_allclose(month.total, F, rtol=RTOL)


def test_chargeback_charges_each_accelerator_hour_c_at_the_planned_utilisation():
    evaluation = evaluate()
    o = option(evaluation, "test-site", "owned_chargeback")
    assert_allclose(evaluation.sites["test-site"].variable_per_accelerator_hour, 0.135, rtol=RTOL)
    assert_allclose(o.total, ACCELERATOR_HOURS * c(0.8), rtol=RTOL)
    share = ACCELERATOR_HOURS / (PER_NODE * 730 * 0.8)
    assert_allclose(o.lines["capital"], share * CAPITAL, rtol=RTOL)
    assert_allclose(o.lines["facility"], share * FACILITY, rtol=RTOL)
    assert_allclose(o.lines["busy_energy"], ACCELERATOR_HOURS * V, rtol=RTOL)


def test_on_demand_is_hours_at_the_price_plus_storage_ingress_and_egress():
    o = option(evaluate(), "test-offer", "on_demand")
    compute = ACCELERATOR_HOURS * 3.0
    storage = 0.02 * (10 + 3 * 0.5) * 1000 * (WALL_HOURS / 730)  # per GB-month × GB × months
    ingress = 10 * 1000 * 0.01
    egress = 0.2 * 1000 * 0.05
    assert_allclose(o.lines["compute"], compute, rtol=RTOL)
    assert_allclose(o.lines["storage"], storage, rtol=RTOL)
    assert_allclose(o.lines["ingress"], ingress, rtol=RTOL)
    assert_allclose(o.lines["egress"], egress, rtol=RTOL)
    assert_allclose(o.total, compute + storage + ingress + egress, rtol=RTOL)


def test_energy_is_busy_it_power_times_hours_then_pue_then_grid_factor():
    evaluation = evaluate()
    owned = option(evaluation, "test-site", "owned_chargeback").energy
    it_kwh = NODES * (1.5 + (6.0 - 1.5) * 1.0) * WALL_HOURS
    assert_allclose(owned.it_kwh, it_kwh, rtol=RTOL)
    assert_allclose(owned.facility_kwh, it_kwh * 1.2, rtol=RTOL)  # ISO/IEC 30134-2 PUE
    assert_allclose(owned.kgco2e, it_kwh * 1.2 * 0.25, rtol=RTOL)
    rented = option(evaluation, "test-offer", "on_demand").energy
    assert_allclose(rented.facility_kwh, it_kwh * 1.1, rtol=RTOL)
    assert_allclose(rented.kgco2e, it_kwh * 1.1 * 0.3, rtol=RTOL)


def test_cooling_is_the_peak_it_power_in_tons_of_12000_btu_per_hour():
    energy = option(evaluate(), "test-site", "owned_chargeback").energy
    assert_allclose(energy.peak_it_kw, NODES * 6.0, rtol=RTOL)
    assert_allclose(energy.cooling_kw_thermal, NODES * 6.0, rtol=RTOL)
    watts_per_ton = 12000 * 0.2930711  # NIST SP 811, App. B.8: Btu_IT/h to W
    assert_allclose(cooling_tons(energy.cooling_kw_thermal), NODES * 6.0 * 1000 / watts_per_ton, rtol=1e-6)
    assert_allclose(cooling_tons(3.516853), 1.0, rtol=1e-12)


def test_a_committed_term_is_paid_in_full_whether_used_or_not():
    o = option(evaluate(), "test-offer", "committed_12m")
    fee = ACCELERATORS * 12 * 730 * 2.0  # 500 of the 8,760 hours are used; all are paid
    assert_allclose(o.lines["commitment"], fee, rtol=RTOL)
    assert_allclose(o.total, fee + o.lines["storage"] + o.lines["ingress"] + o.lines["egress"], rtol=RTOL)


def test_an_upfront_share_is_spread_as_an_annuity_at_the_cost_of_capital():
    factor = (1 - 0.5) + 0.5 * 36 * -npf.pmt(RATE, 36, 1.0)  # (A/P, i, n) from numpy-financial
    o = option(evaluate(), "test-offer", "committed_36m")
    assert_allclose(o.lines["commitment"], ACCELERATORS * 36 * 730 * 1.5 * factor, rtol=RTOL)
    for f, n, annual in [(0.25, 12, 0.08), (1.0, 48, 0.10), (0.0, 24, 0.05), (0.6, 36, 0.0)]:
        ap = 1.0 / n if annual == 0 else -npf.pmt(annual / 12, n, 1.0)
        got = upfront_financing_factor(upfront_fraction=f, months=n, cost_of_capital_annual=annual)
        assert_allclose(got, (1 - f) + f * n * ap, rtol=RTOL)
        assert got >= 1.0 - 1e-15


def test_monthly_recurrence_fills_a_12_month_commitment_with_12_instances():
    o = option(evaluate(recurrence={"every_months": 1, "for_months": 24}), "test-offer", "committed_12m")
    # by calendar 12 / 1 = 12; by capacity ⌊12 × 730 / 500⌋ = 17; by horizon 24
    assert_allclose(o.details["sharing_instances"], 12.0)
    assert_allclose(o.lines["commitment"], ACCELERATORS * 12 * 730 * 2.0 / 12, rtol=RTOL)


def test_instances_longer_than_a_month_fit_fewer_times_into_a_commitment():
    o = option(evaluate(flops=2 * TOTAL_FLOPS, recurrence={"every_months": 1, "for_months": 24}),
               "test-offer", "committed_12m")
    # 1,000 h each, run one after another: ⌊8,760 / 1,000⌋ = 8 < 12 by calendar
    assert_allclose(o.details["sharing_instances"], 8.0)
    assert_allclose(o.lines["commitment"], ACCELERATORS * 12 * 730 * 2.0 / 8, rtol=RTOL)


def test_a_campaign_longer_than_the_term_takes_whole_extra_terms():
    o = option(evaluate(flops=20 * TOTAL_FLOPS), "test-offer", "committed_12m")
    # 10,000 h > 8,760 h: ⌈10,000 / 8,760⌉ = 2 terms
    assert_allclose(o.lines["commitment"], 2 * ACCELERATORS * 12 * 730 * 2.0, rtol=RTOL)


def test_a_new_build_carries_its_nodes_for_their_depreciation_life():
    o = option(evaluate(), "test-site", "owned_new_build")
    node_months = NODES * 60
    assert_allclose(o.lines["capital"], node_months * CAPITAL, rtol=RTOL)
    assert_allclose(o.lines["maintenance"], node_months * MAINTENANCE, rtol=RTOL)
    assert_allclose(o.lines["busy_energy"], ACCELERATOR_HOURS * V, rtol=RTOL)
    assert_allclose(o.total, node_months * F + ACCELERATOR_HOURS * V, rtol=RTOL)
    assert_allclose(o.details["utilisation"], ACCELERATOR_HOURS / (NODES * PER_NODE * 60 * 730), rtol=RTOL)


def test_recurring_instances_share_a_new_build_and_raise_its_utilisation():
    o = option(evaluate(recurrence={"every_months": 1, "for_months": 24}), "test-site", "owned_new_build")
    # by calendar 60, by capacity ⌊60 × 730 / 500⌋ = 87, by horizon 24: 24 instances share 240 node-months
    assert_allclose(o.details["sharing_instances"], 24.0)
    assert_allclose(o.total, NODES * 60 / 24 * F + ACCELERATOR_HOURS * V, rtol=RTOL)
    assert_allclose(o.details["utilisation"], 24 * ACCELERATOR_HOURS / (NODES * PER_NODE * 60 * 730), rtol=RTOL)


def test_new_build_utilisation_counts_every_accelerator_of_the_nodes_bought():
    # 6 accelerators pinned on 4-accelerator nodes: 2 nodes, 8 accelerators bought.
    o = option(evaluate(fixed=6), "test-site", "owned_new_build")
    wall_hours = TOTAL_FLOPS / (6 * SUSTAINED_FLOPS) / 3600  # the same FLOPs on 6: 1,333.3 h
    hours = 6 * wall_hours  # 8,000 accelerator-hours
    assert_allclose(o.layout.accelerator_hours, hours, rtol=RTOL)
    assert_allclose(o.details["utilisation"], hours / (2 * PER_NODE * 60 * 730), rtol=RTOL)


@pytest.mark.parametrize(("allocate", "sharing_kw"), [
    (None, 20 * 6.0),  # the default: the installed load, 20 owned nodes at 6 kW peak
    ("installed", 20 * 6.0),
    ("capacity", 300 / 1.2),  # facility power capacity / PUE
])
def test_an_owned_hall_amortises_its_capex_per_kw_and_shares_its_fixed_cost_as_allocated(allocate, sharing_kw):
    hall = copy.deepcopy(CATALOG)
    hall["sites"][0]["facility"] = {"kind": "owned", "capex_per_kw": 8000, "life_years": 10,
                                    "fixed_cost_per_year": 120000}
    if allocate is not None:
        hall["sites"][0]["facility"]["allocate"] = allocate
    domain_catalog = CatalogIn.model_validate(hall).to_domain()
    month = node_month(site_economics(domain_catalog.sites[0], domain_catalog, Overrides()))
    hall_capital = -npf.pmt(RATE, 10 * 12, 8000 * 6.0)  # the node's 6 kW of hall, over 120 months
    fixed_share = 120000 / 12 * 6.0 / sharing_kw
    assert_allclose(month.facility, hall_capital + fixed_share, rtol=RTOL)
    assert_allclose(month.capital, CAPITAL, rtol=RTOL)


def test_the_facility_line_names_what_shares_the_halls_fixed_cost():
    for allocate, words in (("installed", "installed IT load"), ("capacity", "IT power it can feed")):
        hall = copy.deepcopy(CATALOG)
        hall["sites"][0]["facility"] = {"kind": "owned", "capex_per_kw": 8000, "life_years": 10,
                                        "fixed_cost_per_year": 120000, "allocate": allocate}
        request = QuoteRequestIn.model_validate({"campaign": {
            "name": "test-campaign", "team": "test-team", "data": DATA,
            "work": {"kind": "flops", "total_flops": TOTAL_FLOPS}}, "options": {"terms": ["owned_chargeback"]}})
        option = quote(CatalogIn.model_validate(hall), request)["options"][0]
        basis = next(line["basis"] for line in option["cost"]["lines"] if line["item"] == "facility")
        assert words in basis and f"allocate {allocate}" in basis, basis


def tight_site_quote() -> dict[str, Any]:
    tight = copy.deepcopy(CATALOG)
    tight["sites"][0].update(power_capacity_kw=200, cooling_capacity_kw=150)
    request = QuoteRequestIn.model_validate({"campaign": {
        "name": "test-campaign", "team": "test-team", "data": DATA,
        "work": {"kind": "flops", "total_flops": TOTAL_FLOPS, "parameters": 1e11}}})
    return quote(CatalogIn.model_validate(tight), request)


def test_a_new_build_beyond_the_sites_power_and_cooling_is_ruled_out_with_both_screens():
    tight = copy.deepcopy(CATALOG)
    tight["sites"][0].update(power_capacity_kw=200, cooling_capacity_kw=150)
    o = option(evaluate(catalog=tight, extra_work={"parameters": 1e11}, fixed=None), "test-site",
               "owned_new_build")
    # Memory minimum: 16 B × 1e11 over (0.9 − 0.25) × 80 GB per accelerator → ⌈30.8⌉ = 31
    # accelerators → ⌈31 / 4⌉ = 8 nodes. Power allows ⌊200 / (6 × 1.2)⌋ − 20 = 7 more nodes,
    # cooling ⌊150 / 6⌋ − 20 = 5; the site has room for 40 − 20 = 20.
    shards = np.ceil(16 * 1e11 / ((0.9 - 0.25) * 80e9))
    assert shards == 31
    assert_allclose(o.min_nodes, np.ceil(shards / PER_NODE))
    mask = int(o.screens[0])
    assert mask & screens.POWER and mask & screens.COOLING
    assert not mask & screens.CAPACITY
    assert not bool(o.feasible[0])


def test_the_quote_says_how_many_nodes_power_and_cooling_allow_against_how_many_are_needed():
    document = tight_site_quote()
    build = next(o for o in document["options"]
                 if o["venue"]["id"] == "test-site" and o["term"] == "owned_new_build")
    assert not build["feasible"]
    power = next(r for r in build["reasons"] if r.startswith("power:"))
    cooling = next(r for r in build["reasons"] if r.startswith("cooling:"))
    # Power: 8 × 6 kW × PUE 1.2 = 57.6 kW at the facility; 200 − 20 × 6 × 1.2 = 56.0 kW left.
    assert "8 new nodes draw 57.6 kW at the facility" in power
    assert "leaves 56.0 kW, 1.6 kW short" in power
    # Cooling: 8 × 6 = 48.0 kW of heat; 150 − 20 × 6 = 30.0 kW left.
    assert "8 new nodes reject 48.0 kW of heat" in cooling
    assert "leaves 30.0 kW, 18.0 kW short" in cooling
    chargeback = next(o for o in document["options"]
                      if o["venue"]["id"] == "test-site" and o["term"] == "owned_chargeback")
    assert chargeback["feasible"]  # 10 free nodes of the existing fleet are enough
