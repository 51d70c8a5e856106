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
from service.domain import compiled
from service.domain.breakeven import (
    ABOVE_FULL_USE,
    BEYOND_LIFE,
    NO_MARGIN,
    NO_SAVING,
    RULED_OUT,
    break_even,
    breakeven_utilisation,
    payback,
)
from service.domain.campaign import Overrides
from service.domain.comparison import breakeven_rows, breakeven_utilisations, work_conversion
from service.domain.evaluate import CampaignEvaluation, evaluate_campaign
from service.domain.owning import chargeback_per_accelerator_hour
from service.usecases.quoting import quote

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
        fixed_per_node_month=f, accelerators_per_node=a, variable_per_accelerator_hour=v,
        rented_per_accelerator_hour=p, fleet_nodes=10, campaign_accelerator_hours=1000.0)
    assert np.isnan(figures.utilisation) and np.isnan(figures.accelerator_hours_per_year)
    assert figures.utilisation_reason == NO_MARGIN


def test_a_break_even_above_full_use_is_reported_as_unreachable():
    # F = 10,000 a node-month on 4 accelerators, p − v = 2.5: u* = 10,000 / (4 × 730 × 2.5) = 1.37
    figures = break_even(
        fixed_per_node_month=10000.0, accelerators_per_node=4, variable_per_accelerator_hour=0.5,
        rented_per_accelerator_hour=3.0, fleet_nodes=10, campaign_accelerator_hours=1000.0)
    assert_allclose(figures.utilisation_unbounded, 10000 / (4 * 730 * 2.5), rtol=1e-12)
    assert np.isnan(figures.utilisation)
    assert figures.utilisation_reason == ABOVE_FULL_USE


def test_a_rented_option_that_failed_a_screen_has_no_break_even_and_says_why():
    figures = break_even(
        fixed_per_node_month=10000.0, accelerators_per_node=4, variable_per_accelerator_hour=0.5,
        rented_per_accelerator_hour=np.array([9.0, 9.0]), fleet_nodes=10, campaign_accelerator_hours=1000.0,
        ruled_out=np.array([False, True]))
    assert np.isfinite(figures.utilisation[0]) and np.isnan(figures.utilisation[1])
    assert list(figures.utilisation_reason) == ["", RULED_OUT]


def months_to_pay_back(*, capex: float, saving: list[float], rate: float) -> float | None:
    """Walk month by month, discounting each month's saving, until the capex is repaid; the last
    month counted in part, as the textbooks do."""
    repaid = 0.0
    for month, amount in enumerate(saving, start=1):
        present = amount / (1 + rate) ** month
        if repaid + present >= capex:
            return month - 1 + (capex - repaid) / present
        repaid += present
    return None


def test_payback_discounts_the_rent_saved_on_the_campaign_and_the_background_work():
    # Two new nodes of 4 accelerators: 5,840 h a month. Background work at 30% of them, 1,752 h,
    # plus a campaign of 2,000 h every month; 3,752 h × (3.00 − 0.50) − 2,000 running = 7,380 a month.
    paid = payback(capex=100000.0, running_per_month=2000.0, capacity_hours_per_month=5840.0,
                   campaign_hours_by_month=np.full(60, 2000.0), background_utilisation=0.3,
                   rented_per_accelerator_hour=3.0, variable_per_accelerator_hour=0.5, cost_of_capital_annual=0.06)
    by_hand = months_to_pay_back(capex=100000.0, saving=[7380.0] * 60, rate=0.06 / 12)
    assert by_hand is not None and 14 < by_hand < 15  # 13.55 months undiscounted
    assert_allclose(paid.months, by_hand, rtol=1e-12)
    assert_allclose(paid.demand_hours_per_month, 3752.0)


def test_payback_counts_only_the_hours_the_new_nodes_have():
    # The campaign asks 9,000 h in its one month; the nodes have 5,840: month 1 saves 5,840 × 2.5 −
    # 2,000, later months only the background work's 0.5 × 5,840 × 2.5 − 2,000.
    campaign = np.zeros(48)
    campaign[0] = 9000.0
    paid = payback(capex=100000.0, running_per_month=2000.0, capacity_hours_per_month=5840.0,
                   campaign_hours_by_month=campaign, background_utilisation=0.5, rented_per_accelerator_hour=3.0,
                   variable_per_accelerator_hour=0.5, cost_of_capital_annual=0.0)
    saving = [5840 * 2.5 - 2000] + [0.5 * 5840 * 2.5 - 2000] * 47
    assert_allclose(paid.months, months_to_pay_back(capex=100000.0, saving=saving, rate=0.0), rtol=1e-12)


def test_payback_is_none_only_when_the_rent_saved_never_covers_the_running_cost():
    common: dict[str, Any] = dict(capex=100000.0, running_per_month=2000.0, capacity_hours_per_month=5840.0,
                                  campaign_hours_by_month=np.zeros(48), rented_per_accelerator_hour=3.0,
                                  variable_per_accelerator_hour=0.5, cost_of_capital_annual=0.08)
    idle = payback(**common, background_utilisation=0.1)  # 584 h × 2.5 = 1,460 < 2,000 a month
    assert np.isnan(idle.months) and idle.reason == NO_SAVING
    slow = payback(**common, background_utilisation=0.2)  # 920 a month: 39% of the capex in 48 months
    assert np.isnan(slow.months) and slow.reason == BEYOND_LIFE
    assert 0.0 < float(slow.recovered_fraction) < 1.0


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


def test_a_sweep_reads_the_break_even_utilisations_the_rows_give():
    """comparison.breakeven_utilisations, which a sweep calls instead of breakeven_rows, over
    scenarios with break-evens within reach, beyond full use and with no margin (demo data)."""
    scenarios = 40
    evaluation = evaluate_example("owned-wins", Overrides(rented_price_factor=np.linspace(0.05, 3.0, scenarios),
                                                          electricity_price_per_kwh=np.linspace(0.02, 0.9, scenarios)))
    labels, every = breakeven_utilisations(evaluation, scenarios)
    rows = breakeven_rows(evaluation)
    assert labels == [(r.site, r.offer, r.term) for r in rows]
    np.testing.assert_array_equal(every, np.stack([np.broadcast_to(r.figures.utilisation, (scenarios,)) for r in rows]))
    assert np.isfinite(every).any() and np.isnan(every).any()


def test_the_compiled_break_even_utilisations_are_the_rows_to_the_bit():
    """With the compiled kernel, row by row: the same figures as the rows of `breakeven_rows` (demo data)."""
    kernel = compiled.kernel()
    assert kernel is not None
    scenarios = 40
    evaluation = evaluate_example("owned-wins", Overrides(rented_price_factor=np.linspace(0.05, 3.0, scenarios),
                                                          electricity_price_per_kwh=np.linspace(0.02, 0.9, scenarios),
                                                          utilisation_planned=np.linspace(0.2, 0.95, scenarios)))
    labels, compiled_every = breakeven_utilisations(evaluation, scenarios, kernel)
    rows = breakeven_rows(evaluation)
    assert labels == [(r.site, r.offer, r.term) for r in rows]
    np.testing.assert_array_equal(compiled_every,
                                  np.stack([np.broadcast_to(r.figures.utilisation, (scenarios,)) for r in rows]))
    assert np.isfinite(compiled_every).any() and np.isnan(compiled_every).any()


def test_a_conversion_is_one_value_where_both_speeds_are():
    """A rented option's conversion to owned work is made once where both venues' speeds are one value for
    every scenario (a sweep over prices), and is then the value each scenario would get; an interruptible
    one, which reads each scenario's failure overheads, stays one per scenario (demo data)."""
    scenarios = 30
    evaluation = evaluate_example("owned-wins", Overrides(rented_price_factor=np.linspace(0.5, 2.0, scenarios)))
    owned = next(o for o in evaluation.options if o.term == "owned_chargeback")
    checked = set()
    for rented in (o for o in evaluation.options if o.venue_kind == "rented"):
        conversion = work_conversion(rented, owned)
        expected = (np.asarray(owned.sustained_flops_per_accelerator, dtype=float)
                    / np.asarray(rented.sustained_flops_per_accelerator, dtype=float))
        if rented.term == "interruptible":
            expected = expected * (1.0 + rented.layout.failure_overhead) / (1.0 + owned.layout.failure_overhead)
            assert conversion.shape == (scenarios,)
        else:
            assert conversion.shape == (1,)
        np.testing.assert_array_equal(np.broadcast_to(conversion, (scenarios,)), expected)
        checked.add(rented.term == "interruptible")
    assert checked == {True, False}


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


def test_a_quotes_break_even_rows_say_why_owning_never_wins_and_share_their_sites_payback_basis():
    """Rented capacity at a thousandth of its price: every rent is below the owned sites' busy energy, so
    no utilisation makes owning win and the rent saved never covers new nodes' running cost; each row
    says so, and every row of a site carries the same payback basis, naming that site."""
    request = json.loads((EXAMPLES / "campaign-owned-wins.json").read_text("utf-8"))
    request.setdefault("overrides", {})["rented_price_factor"] = 0.001
    catalog = CatalogIn.model_validate(json.loads((EXAMPLES / "catalog.json").read_text("utf-8")))
    rows = quote(catalog, QuoteRequestIn.model_validate(request))["breakeven"]
    assert rows
    for row in rows:
        assert row["utilisation"] is None
        assert row["reason"] == "the rented price is below the owned busy-energy cost: owning never wins"
        assert row["payback_months"] is None
        assert row["payback_reason"] == "none: the rent saved never covers the new nodes' running cost"
        assert f"a new build at {row['site']} buys" in row["payback_basis"]
    bases = {(row["site"], row["payback_basis"]) for row in rows}
    assert len(bases) == len({row["site"] for row in rows}) == 2


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
