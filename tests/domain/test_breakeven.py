"""Break-even utilisation, payback and how owned and committed costs move (model.md §6-8).

c(u) = F / (A · 730 · u) + v and u* = F / (A · 730 · (p − v)) are the model's own definitions
(model.md §6 and §8); the properties below follow from them by algebra. Catalogs here are demo
data with invented figures, apart from the demo catalog in pricing_examples/.
"""

import copy
import json
import math
from pathlib import Path
from typing import Any

import numpy as np
from hypothesis import example, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from service.contract.catalog import CatalogIn
from service.contract.request import QuoteRequestIn
from service.domain.breakeven import (
    ABOVE_FULL_USE,
    BEYOND_LIFE,
    NO_MARGIN,
    break_even,
    breakeven_utilisation,
    payback_months,
)
from service.domain.campaign import Overrides
from service.domain.comparison import breakeven_rows
from service.domain.evaluate import CampaignEvaluation, evaluate_campaign
from service.domain.owning import chargeback_per_accelerator_hour

EXAMPLES = Path(__file__).resolve().parents[2] / "pricing_examples"

fixed_costs = st.floats(min_value=1.0, max_value=1e6)
per_node = st.sampled_from([1, 2, 4, 8, 16])
energy = st.floats(min_value=0.0, max_value=5.0)


@given(fixed_costs, per_node, energy, st.floats(min_value=1e-3, max_value=50.0))
def test_owning_at_the_break_even_utilisation_costs_exactly_the_rented_price(f, a, v, margin):
    p = v + margin
    u = breakeven_utilisation(fixed_per_node_month=f, accelerators_per_node=a,
                              variable_per_accelerator_hour=v, rented_per_accelerator_hour=p)
    c = chargeback_per_accelerator_hour(fixed_per_node_month=f, accelerators_per_node=a,
                                        variable_per_accelerator_hour=v, utilisation=u)
    assert_allclose(c, p, rtol=1e-9)


@given(fixed_costs, per_node, energy, st.floats(min_value=0.0, max_value=1.0))
def test_there_is_no_break_even_when_the_rent_is_at_or_below_the_busy_energy(f, a, v, share):
    p = v * share
    u = breakeven_utilisation(fixed_per_node_month=f, accelerators_per_node=a,
                              variable_per_accelerator_hour=v, rented_per_accelerator_hour=p)
    assert np.isinf(u)
    figures = break_even(
        fixed_per_node_month=f, running_per_node_month=0.5 * f, capex_per_node=40 * f, accelerators_per_node=a,
        variable_per_accelerator_hour=v, rented_per_accelerator_hour=p, fleet_nodes=10,
        campaign_accelerator_hours=1000.0, demand_hours_per_year=50000.0, new_nodes=2, depreciation_months=60)
    assert np.isnan(figures.utilisation) and np.isnan(figures.accelerator_hours_per_year)
    assert figures.utilisation_reason == NO_MARGIN
    assert np.isnan(figures.payback_months)


def test_a_break_even_above_full_use_is_reported_as_unreachable():
    # F = 10,000 a node-month on 4 accelerators, p − v = 2.5: u* = 10,000 / (4 × 730 × 2.5) = 1.37
    figures = break_even(
        fixed_per_node_month=10000.0, running_per_node_month=3000.0, capex_per_node=300000.0,
        accelerators_per_node=4, variable_per_accelerator_hour=0.5, rented_per_accelerator_hour=3.0,
        fleet_nodes=10, campaign_accelerator_hours=1000.0, demand_hours_per_year=50000.0, new_nodes=2,
        depreciation_months=60)
    assert_allclose(figures.utilisation_unbounded, 10000 / (4 * 730 * 2.5), rtol=1e-12)
    assert np.isnan(figures.utilisation)
    assert figures.utilisation_reason == ABOVE_FULL_USE


def months_to_pay_back(*, capex: float, running: float, hours: float, p: float, v: float,
                       limit: int = 1000) -> int | None:
    """Walk month by month until the cumulative rent exceeds capex plus the cumulative owned cost."""
    rent = owned = 0.0
    for month in range(1, limit + 1):
        rent += hours * p
        owned += running + hours * v
        if rent >= capex + owned:
            return month
    return None


def test_payback_is_the_first_month_the_rent_saved_covers_the_capex_and_running_cost():
    # 100,000 capex; 5,000 h a month rented at 3.00 or run at 0.50 busy energy plus 2,000 a month:
    # 10,500 saved a month, 94,500 after 9 months, 105,000 after 10.
    by_hand = months_to_pay_back(capex=100000, running=2000, hours=5000, p=3.0, v=0.5)
    assert by_hand == 10
    got = payback_months(capex=100000.0, running_per_month=2000.0, demand_hours_per_month=5000.0,
                         rented_per_accelerator_hour=3.0, variable_per_accelerator_hour=0.5)
    assert_allclose(got, by_hand)


def test_payback_counts_only_the_demand_the_new_nodes_can_serve():
    # One new node of 4 accelerators serves 4 × 730 = 2,920 h a month of the 5,000 asked:
    # 2,920 × 2.5 − 2,000 = 5,300 saved a month → 18 months give 95,400, 19 give 100,700.
    by_hand = months_to_pay_back(capex=100000, running=2000, hours=4 * 730, p=3.0, v=0.5)
    assert by_hand == 19
    common: dict[str, Any] = dict(
        fixed_per_node_month=4000.0, running_per_node_month=2000.0, capex_per_node=100000.0,
        accelerators_per_node=4, variable_per_accelerator_hour=0.5, rented_per_accelerator_hour=3.0,
        fleet_nodes=10, campaign_accelerator_hours=5000.0, demand_hours_per_year=12 * 5000.0, new_nodes=1)
    assert_allclose(break_even(**common, depreciation_months=60).payback_months, by_hand)
    short = break_even(**common, depreciation_months=12)
    assert np.isnan(short.payback_months) and short.payback_reason == BEYOND_LIFE


def demo(campaign: str) -> tuple[CatalogIn, QuoteRequestIn]:
    catalog = CatalogIn.model_validate(json.loads((EXAMPLES / "catalog.json").read_text()))
    request = QuoteRequestIn.model_validate(json.loads((EXAMPLES / f"campaign-{campaign}.json").read_text()))
    return catalog, request


def evaluate_example(campaign: str, overrides: Overrides | None = None) -> CampaignEvaluation:
    catalog, request = demo(campaign)
    domain_campaign, options, _ = request.to_domain()
    return evaluate_campaign(catalog.to_domain(), domain_campaign, options, overrides)


def test_breakeven_rows_pair_every_site_with_every_rented_option():
    evaluation = evaluate_example("owned-wins")
    rows = breakeven_rows(evaluation)
    catalog, _ = demo("owned-wins")
    rented = {(o.id, "on_demand") for o in catalog.offers if o.on_demand_per_accelerator_hour}
    rented |= {(o.id, f"committed_{c.months}m") for o in catalog.offers for c in o.committed}
    rented |= {(o.id, "interruptible") for o in catalog.offers if o.interruptible}
    expected = {(s.id, offer, term) for s in catalog.sites for offer, term in rented}
    assert len(expected) == 2 * (4 + 3 + 3)  # 2 sites × (4 + 3 + 3 terms on the 3 offers)
    assert len(rows) == len(expected)
    assert {(r.site, r.offer, r.term) for r in rows} == expected


def test_every_reachable_break_even_of_a_quote_meets_its_rented_price():
    evaluation = evaluate_example("owned-wins")
    checked = 0
    for row in breakeven_rows(evaluation):
        site = evaluation.sites[row.site]
        u = row.figures.utilisation_unbounded
        if not np.isfinite(u).all():
            continue
        c = chargeback_per_accelerator_hour(
            fixed_per_node_month=site.node.total,
            accelerators_per_node=site.economics.site.node_type.accelerators_per_node,
            variable_per_accelerator_hour=site.variable_per_accelerator_hour, utilisation=u)
        assert_allclose(c, row.rented_per_accelerator_hour, rtol=1e-9)
        checked += 1
    assert checked > 0


@settings(max_examples=25, deadline=None)
@given(st.floats(min_value=0.0, max_value=1.0), st.floats(min_value=1e-4, max_value=2.0))
def test_a_higher_electricity_price_never_lowers_an_owned_total(low, rise):
    cheap = evaluate_example("owned-wins", Overrides(electricity_price_per_kwh=low))
    dear = evaluate_example("owned-wins", Overrides(electricity_price_per_kwh=low + rise))
    owned = [(a, b) for a, b in zip(cheap.options, dear.options, strict=True) if a.venue_kind == "owned"]
    assert len(owned) == 4
    for a, b in owned:
        assert a.label == b.label
        assert float(b.total[0]) >= float(a.total[0]) * (1 - 1e-12), a.label


CATALOG: dict[str, Any] = {
    "name": "test-catalog", "currency": "EUR", "finance": {"cost_of_capital_annual": 0.06},
    "accelerators": [{"id": "test-acc", "memory_gb": 80, "peak_tflops": {"bf16": 100}, "utilisation": 0.5}],
    "node_types": [{"id": "test-node", "accelerator": "test-acc", "accelerators_per_node": 4,
                    "intra_node_gbps": 1000, "network_gbps": 200, "power_kw_peak": 6.0,
                    "power_kw_idle": 1.5, "checkpoint_write_gbps": 10}],
    "offers": [{"id": "test-offer", "provider": "test-provider", "region": "test-region",
                "jurisdiction": "DE", "node_type": "test-node", "nodes_max": 64,
                "committed": [{"months": 12, "per_accelerator_hour": 2.0}]}],
}


@settings(max_examples=60, deadline=None)
@given(
    hours=st.floats(min_value=1.0, max_value=30000.0),
    accelerators=st.integers(min_value=1, max_value=40),
    months=st.sampled_from([1, 6, 12, 36]),
    upfront=st.floats(min_value=0.0, max_value=1.0),
    rate=st.floats(min_value=0.0, max_value=0.3),
)
@example(hours=500.0, accelerators=6, months=12, upfront=0.0, rate=0.06)  # 6 pinned hold 2 nodes of 4
@example(hours=1.0, accelerators=4, months=12, upfront=0.5, rate=1e-17)  # (1 + i)^n rounds to 1
def test_a_one_off_committed_term_never_costs_less_than_its_full_fee(hours, accelerators, months, upfront,
                                                                    rate):
    catalog = copy.deepcopy(CATALOG)
    catalog["finance"]["cost_of_capital_annual"] = rate
    catalog["offers"][0]["committed"] = [{"months": months, "per_accelerator_hour": 2.0,
                                          "upfront_fraction": upfront}]
    flops = accelerators * 100e12 * 0.5 * 3600 * hours  # `hours` of wall clock on the pinned count
    request = QuoteRequestIn.model_validate({
        "campaign": {"name": "test-campaign", "team": "test-team", "work": {"kind": "flops", "total_flops": flops}},
        "options": {"fixed_accelerators": accelerators, "terms": ["committed"]}})
    option = evaluate_campaign(CatalogIn.model_validate(catalog).to_domain(), *request.to_domain()).options[0]
    nodes = math.ceil(accelerators / 4)
    assert option.layout.nodes[0] == nodes
    full_fee = nodes * 4 * months * 730 * 2.0  # whole nodes held for the whole term
    assert float(option.lines["commitment"][0]) >= full_fee * (1 - 1e-12)
    assert float(option.total[0]) >= full_fee * (1 - 1e-12)
