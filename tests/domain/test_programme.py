"""Programme totals, cash flow and NPV, the two views of owned cost, discounted payback, and the
break-even checked end to end (model.md §6 and §8).

References: numpy-financial's `npv` and `pmt` (the reference library for time-value arithmetic);
discounted payback from Ross, Westerfield and Jordan, "Fundamentals of Corporate Finance", ch. 9
"Net Present Value and Other Investment Criteria", "The Discounted Payback" (the worked values
below are from memory of the text and confirmed in public copies of its worked problems, not in
the book itself). Catalogs other than the demo in pricing_examples/ are invented test data.
"""

import copy
import json
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np
import numpy_financial as npf
import pytest
from numpy.testing import assert_allclose

from service.contract.catalog import CatalogIn
from service.contract.request import QuoteRequestIn
from service.domain.campaign import Recurrence
from service.domain.evaluate import CampaignEvaluation, OptionResult, evaluate_campaign
from service.domain.finance import capital_recovery_payment, discounted_payback, present_value
from service.domain.programme import cash_flow, npv, programme_total, view_total
from service.usecases.quoting import quote

EXAMPLES = Path(__file__).resolve().parents[2] / "pricing_examples"


def demo_catalog() -> dict[str, Any]:
    data: dict[str, Any] = json.loads((EXAMPLES / "catalog.json").read_text())
    return data


def demo_request(name: str) -> dict[str, Any]:
    data: dict[str, Any] = json.loads((EXAMPLES / f"campaign-{name}.json").read_text())
    return data


def evaluate(catalog: dict[str, Any], request: dict[str, Any]) -> CampaignEvaluation:
    return evaluate_campaign(CatalogIn.model_validate(catalog).to_domain(),
                             *QuoteRequestIn.model_validate(request).to_domain())


def option(evaluation: CampaignEvaluation, label: str) -> OptionResult:
    return next(o for o in evaluation.options if o.label == label)


# ---- discounted payback: Ross, Westerfield and Jordan, ch. 9 --------------------------------------

def test_discounted_payback_of_a_perpetuity_is_a_little_less_than_nine_years():
    # RWJ, "Calculating Discounted Payback": costs $400, pays $100 a year forever, 20% discount rate:
    # the ordinary payback is 4 years, the discounted payback "a little less than nine years" (the
    # annuity factor reaches 4 when 1.2^−T = 0.2, T = ln 5 / ln 1.2 = 8.83).
    years = discounted_payback(investment=400.0, inflows=np.full(30, 100.0), rate=0.20)
    assert 8.8 < float(years) < 9.0
    assert float(discounted_payback(investment=400.0, inflows=np.full(30, 100.0), rate=0.0)) == 4.0


@pytest.mark.parametrize(("investment", "expected"), [(5200.0, 1.96), (5400.0, 2.03), (10400.0, 3.65)])
def test_discounted_payback_of_uneven_inflows_matches_the_textbook_problem(investment, expected):
    # RWJ end-of-chapter problem "Calculating Discounted Payback": inflows 2,800, 3,700, 5,100 and
    # 4,300 at 14%; an initial cost of 5,200 → 1.96 years, 5,400 → 2.03, 10,400 → 3.65 (two decimals).
    years = discounted_payback(investment=investment, inflows=np.array([2800.0, 3700.0, 5100.0, 4300.0]),
                               rate=0.14)
    assert_allclose(years, expected, atol=0.005)


def test_an_investment_the_discounted_inflows_never_repay_has_no_payback():
    # RWJ problem: 10,000 with 2,600 a year for six years. At 15% the six discounted inflows sum to
    # 9,839.66 and "the full 10,000 is never recovered". At 10% they reach 9,856.05 after five years
    # and the sixth (1,467.63) repays the rest: 5 + 143.95 / 1,467.63 = 5.10 years [derived].
    flows = np.full(6, 2600.0)
    assert np.isinf(discounted_payback(investment=10000.0, inflows=flows, rate=0.15))
    assert_allclose(npf.npv(0.15, [0.0, *flows]), 9839.66, atol=0.005)
    assert_allclose(discounted_payback(investment=10000.0, inflows=flows, rate=0.10), 5 + 143.95 / 1467.63,
                    atol=1e-4)


# ---- present value and the annuity against numpy-financial ----------------------------------------

def test_present_value_is_numpy_financials_npv():
    flows = np.array([-250.0, 75.0, 125.0, 100.0, 50.0, -10.0])
    for rate in (0.0, 0.01, 0.12):
        assert_allclose(present_value(flows, rate), npf.npv(rate, flows), rtol=1e-12)


def test_the_capital_annuity_and_the_purchase_less_residual_have_one_present_value():
    # What the programme charges (the annuity, numpy-financial `pmt`) and what the cash flow pays
    # (capex now, the residual back after n months) are worth the same today at the cost of capital.
    rate, months, capex, residual = 0.08 / 12, 48, 4_304_000.0, 344_320.0
    payment = float(capital_recovery_payment(principal=capex, rate=rate, periods=months, residual=residual))
    assert_allclose(payment, npf.pmt(rate, months, -capex, residual), rtol=1e-12)
    annuity = npf.npv(rate, [0.0] + [payment] * months)
    purchase = npf.npv(rate, [capex] + [0.0] * (months - 1) + [-residual])
    assert_allclose(annuity, purchase, rtol=1e-12)


# ---- the recurring demo campaign --------------------------------------------------------------------

@pytest.fixture(scope="module")
def recurring() -> CampaignEvaluation:
    return evaluate(demo_catalog(), demo_request("recurring"))


def test_the_programme_total_is_the_instances_times_one_instance(recurring):
    assert float(recurring.instances_total) == 36
    for o in recurring.options:
        assert_allclose(programme_total(o, recurring, "full"), 36 * o.total, rtol=1e-12)


def test_an_unfilled_last_commitment_is_paid_whole():
    # 30 monthly instances on a 12-month commitment: 3 terms are bought, the last used by 6 instances.
    request = demo_request("recurring")
    request["campaign"]["recurrence"] = {"every_months": 1, "for_months": 30}
    evaluation = evaluate(demo_catalog(), request)
    committed = option(evaluation, "nimbrel-ardvolly-a88/committed_12m")
    assert float(committed.details["sharing_instances"][0]) == 12
    fee = float(committed.lines["commitment"][0]) * 12  # one whole commitment
    others = float(committed.total[0]) - float(committed.lines["commitment"][0])
    assert_allclose(programme_total(committed, evaluation, "full"), 3 * fee + 30 * others, rtol=1e-12)


def test_rented_instances_are_paid_monthly_and_discounted_as_numpy_financial_does(recurring):
    on_demand = option(recurring, "corvane-seronne-b176/on_demand")
    flow = cash_flow(on_demand, recurring, "full")
    total = float(on_demand.total[0])
    assert_allclose(flow.total[0], [total] * 36, rtol=1e-12)
    assert_allclose(npv(flow, recurring), npf.npv(0.08 / 12, [total] * 36), rtol=1e-12)
    yearly = flow.by_year()
    assert_allclose(yearly.total[0], [12 * total] * 3, rtol=1e-12)


def test_a_new_build_pays_its_capital_when_bought_and_gets_its_residual_back(recurring):
    build = option(recurring, "rhine-campus/owned_new_build")
    site = next(s for s in demo_catalog()["sites"] if s["id"] == "rhine-campus")
    nodes = float(build.layout.nodes[0])
    capex = nodes * sum(site["capex"].values())
    sharing, carried = float(build.details["sharing_instances"][0]), float(build.details["carried_months"][0])
    assert (sharing, carried) == (36, 48)
    # Running cost per node-month from the instance's own lines: node-months × item / sharing.
    running = sum(float(build.lines[item][0]) for item in ("facility", "maintenance", "staff", "idle_energy"))
    running_per_month = running * sharing / carried
    variable = float(build.total[0]) - running - float(build.lines["capital"][0])
    by_hand = np.zeros(48)
    by_hand[0] += capex
    by_hand += running_per_month
    by_hand[:36] += variable
    by_hand[47] -= capex * site["residual_fraction"]
    flow = cash_flow(build, recurring, "full")
    assert_allclose(flow.total[0], by_hand, rtol=1e-9)
    assert_allclose(npv(flow, recurring), npf.npv(0.08 / 12, by_hand), rtol=1e-9)
    assert_allclose(flow.by_year().capital[0], [capex, 0, 0, -capex * site["residual_fraction"]], rtol=1e-12)


def test_a_committed_term_pays_its_up_front_share_then_monthly(recurring):
    committed = option(recurring, "nimbrel-ardvolly-a88/committed_36m")  # 50% up front
    fee = float(committed.layout.nodes[0]) * 8 * 36 * 730 * 2.7
    by_hand = np.full(36, 0.5 * fee / 36)
    by_hand[0] += 0.5 * fee
    flow = cash_flow(committed, recurring, "full")
    assert_allclose(flow.rent[0], by_hand, rtol=1e-12)


# ---- the two views of owned cost ----------------------------------------------------------------------

def capacity_allocated_demo() -> dict[str, Any]:
    """The demo catalog with the German hall's fixed cost shared by its capacity and the Norwegian
    hall planned at 60% use: the full view, which charges each site's fixed cost at its planned
    use, prefers the German hall; the incremental view, only what the campaign adds (busy energy
    at 0.06 against 0.19 per kWh), the Norwegian one."""
    catalog = demo_catalog()
    catalog["sites"][1]["facility"]["allocate"] = "capacity"
    catalog["sites"][0]["utilisation_planned"] = 0.6
    return catalog


def test_the_incremental_view_is_the_busy_energy_and_data_when_the_site_has_room():
    evaluation = evaluate(demo_catalog(), demo_request("owned-wins"))
    for label in ("rhine-campus/owned_chargeback", "fjordvik-hall/owned_chargeback"):
        o = option(evaluation, label)
        added = sum(float(v[0]) for k, v in o.lines.items()
                    if k not in ("capital", "facility", "maintenance", "staff", "idle_energy"))
        assert_allclose(view_total(o, evaluation, "incremental"), added, rtol=1e-12)
        assert added < 0.1 * float(o.total[0])
    build = option(evaluation, "rhine-campus/owned_new_build")  # buys every node: both views agree
    assert_allclose(view_total(build, evaluation, "incremental"), build.total, rtol=1e-12)


@pytest.mark.parametrize("view", ["full", "incremental"])
def test_the_two_views_rank_two_owned_sites_in_opposite_orders_and_the_recommendation_says_so(view):
    request = demo_request("owned-wins")
    request.setdefault("options", {})["owned_cost_view"] = view
    body = quote(CatalogIn.model_validate(capacity_allocated_demo()), QuoteRequestIn.model_validate(request))
    owned = [o for o in body["options"] if o["term"] == "owned_chargeback"]
    by_full = sorted(owned, key=lambda o: o["cost"]["full_total"])
    by_incremental = sorted(owned, key=lambda o: o["cost"]["incremental_total"])
    assert [o["venue"]["id"] for o in by_full] == ["rhine-campus", "fjordvik-hall"]
    assert [o["venue"]["id"] for o in by_incremental] == ["fjordvik-hall", "rhine-campus"]
    ranked_first = by_full[0] if view == "full" else by_incremental[0]
    other_first = by_incremental[0] if view == "full" else by_full[0]
    recommendation = body["recommendation"]
    assert recommendation["venue"] == ranked_first["venue"]["id"]
    assert recommendation["views_agree"] is False
    assert recommendation["other_view"]["venue"] == other_first["venue"]["id"]
    assert "The views disagree" in recommendation["why"]
    assert f"{other_first['venue']['id']}/owned_chargeback ranks first" in recommendation["why"]
    for o in body["options"]:
        assert o["cost"]["view"] == view
        assert o["cost"]["total"] == o["cost"][f"{view}_total"]


def test_the_demo_views_agree_and_the_recommendation_says_that_too():
    body = quote(CatalogIn.model_validate(demo_catalog()), QuoteRequestIn.model_validate(demo_request("owned-wins")))
    assert body["recommendation"]["views_agree"] is True
    assert "ranks first on the incremental view" in body["recommendation"]["why"]


def test_of_options_equal_in_the_other_view_the_recommendation_names_the_first_ranked():
    """Two offers alike in every figure tie in both views: the other view's first is the first of them in the
    ranking, the recommended one itself, so the views agree."""
    catalog = demo_catalog()
    ranked = quote(CatalogIn.model_validate(catalog), QuoteRequestIn.model_validate(demo_request("renting-wins")))
    first = ranked["recommendation"]["venue"]
    twin = copy.deepcopy(next(o for o in catalog["offers"] if o["id"] == first))
    twin["id"] = f"{first}-twin"
    catalog["offers"].append(twin)
    body = quote(CatalogIn.model_validate(catalog), QuoteRequestIn.model_validate(demo_request("renting-wins")))
    tied = [o for o in body["options"] if o["venue"]["id"] in (first, twin["id"])
            and o["term"] == ranked["recommendation"]["term"]]
    assert [o["venue"]["id"] for o in tied] == [first, twin["id"]]
    assert tied[0]["cost"]["total"] == tied[1]["cost"]["total"]
    assert tied[0]["cost"]["incremental_total"] == tied[1]["cost"]["incremental_total"]
    recommendation = body["recommendation"]
    assert recommendation["venue"] == first and recommendation["views_agree"] is True
    assert recommendation["other_view"]["venue"] == first


# ---- break-even, end to end -----------------------------------------------------------------------------

BREAK_EVEN_CATALOG: dict[str, Any] = {
    "name": "test-catalog", "currency": "EUR", "finance": {"cost_of_capital_annual": 0.06},
    "accelerators": [{"id": "test-acc", "memory_gb": 80, "peak_tflops": {"bf16": 100}, "utilisation": 0.5},
                     {"id": "fast-acc", "memory_gb": 80, "peak_tflops": {"bf16": 250}, "utilisation": 0.5}],
    "node_types": [{"id": "test-node", "accelerator": "test-acc", "accelerators_per_node": 4, "intra_node_gbps": 1000,
                    "network_gbps": 200, "power_kw_peak": 6.0, "power_kw_idle": 1.5, "checkpoint_write_gbps": 10},
                   {"id": "fast-node", "accelerator": "fast-acc", "accelerators_per_node": 4, "intra_node_gbps": 1000,
                    "network_gbps": 200, "power_kw_peak": 6.0, "power_kw_idle": 1.5, "checkpoint_write_gbps": 10}],
    "sites": [{"id": "test-site", "jurisdiction": "DE", "node_type": "test-node", "nodes_owned": 20, "nodes_max": 40,
               "capex": {"node_price": 200000}, "depreciation_months": 48, "maintenance_fraction_per_year": 0.05,
               "staff_cost_per_node_year": 5000, "facility": {"kind": "colocation", "price_per_kw_month": 150},
               "pue": 1.2, "electricity_price_per_kwh": 0.1, "utilisation_planned": 0.7, "utilisation_current": 0.5}],
    "offers": [{"id": "same-offer", "provider": "test-provider", "region": "test-region", "jurisdiction": "DE",
                "node_type": "test-node", "nodes_max": 64, "on_demand_per_accelerator_hour": 3.0},
               {"id": "fast-offer", "provider": "test-provider", "region": "test-region", "jurisdiction": "DE",
                "node_type": "fast-node", "nodes_max": 64, "on_demand_per_accelerator_hour": 7.0}],
}


@pytest.mark.parametrize("offer", ["same-offer", "fast-offer"])
def test_at_the_break_even_utilisation_owning_and_renting_the_same_work_cost_the_same(offer):
    # 8 accelerators (a 2.5× faster one on fast-offer) with no communication to slow either down.
    request: dict[str, Any] = {
        "campaign": {"name": "test-campaign", "team": "test-team",
                     "work": {"kind": "flops", "total_flops": 8 * 50e12 * 3600 * 500}},
        "options": {"fixed_accelerators": 8, "terms": ["owned_chargeback", "on_demand"]}}
    catalog = CatalogIn.model_validate(BREAK_EVEN_CATALOG)
    body = quote(catalog, QuoteRequestIn.model_validate(request))
    row = next(r for r in body["breakeven"] if r["offer"] == offer)
    assert 0.0 < row["utilisation"] < 1.0
    at_break_even = copy.deepcopy(request)
    at_break_even["overrides"] = {"utilisation_planned": row["utilisation"]}
    totals = {o["venue"]["id"]: o["cost"]["total"]
              for o in quote(catalog, QuoteRequestIn.model_validate(at_break_even))["options"]}
    assert totals["test-site"] == pytest.approx(totals[offer], rel=0.005)


def test_a_programme_longer_than_a_century_has_totals_but_no_cash_flow():
    # Requests stop at a century (domain/limits.py); the core's own guard is checked beneath them.
    campaign, options, overrides = QuoteRequestIn.model_validate(demo_request("recurring")).to_domain()
    campaign = replace(campaign, recurrence=Recurrence(every_months=1, for_months=1300))
    evaluation = evaluate_campaign(CatalogIn.model_validate(demo_catalog()).to_domain(), campaign, options, overrides)
    on_demand = option(evaluation, "corvane-seronne-b176/on_demand")
    assert_allclose(programme_total(on_demand, evaluation, "full"), 1300 * on_demand.total, rtol=1e-12)
    flow = cash_flow(on_demand, evaluation, "full")
    assert np.isnan(flow.total).all() and np.isnan(npv(flow, evaluation)).all()
