"""Placement (model.md §9): residency, the screens and their reasons, what to change when nothing
is feasible, and the ranking, checked against hand computations written out from the inputs.

References: ISO 3166-1 alpha-2 country codes as listed by pycountry (the reference the service
validates against; "QQ" is a user-assigned code no country holds, "DE" is Germany's); model states
of 16 bytes per parameter with mixed-precision Adam (Rajbhandari et al. 2020, ZeRO, SC20, §3.1);
activations of 34·s·b·h bytes per layer with selective recomputation and 2·s·b·h with full
recomputation (Korthikanti et al. 2022, "Reducing Activation Recomputation in Large Transformer
Models", Eq. 1 and §5). The 90% usable memory, the 25% activation reserve, the micro-batch of one
sequence and the busy load of 1.0 are `common practice` defaults (service.domain.assumptions).
The catalogs below are demo data with round invented figures; the demo catalog in
pricing_examples/ is demo data too.
"""

import copy
import json
import math
from pathlib import Path
from typing import Any

import numpy as np
import pycountry
import pytest

from service.contract.catalog import CatalogIn
from service.contract.request import QuoteRequestIn
from service.domain import screens
from service.domain.evaluate import CampaignEvaluation, evaluate_campaign
from service.domain.residency import allowed_jurisdictions
from service.errors import InvalidInput
from service.usecases.quoting import quote

EXAMPLES = Path(__file__).resolve().parents[2] / "pricing_examples"
DAY = 86400.0
GB = 1e9
GIB = 2**30

# One accelerator type: 80 GB, 100 TFLOP/s bf16 at 50% utilisation = 50e12 FLOP/s sustained.
MEMORY_GB, SUSTAINED, PER_NODE, PEAK_KW, PUE = 80.0, 100e12 * 0.5, 4, 6.0, 1.2
OWNED, CURRENT = 20, 0.5  # the site's fleet and its current utilisation

BASE: dict[str, Any] = {
    "name": "placement-test", "currency": "EUR", "finance": {"cost_of_capital_annual": 0.06},
    "jurisdiction_groups": {"WESTBLOC": ["DE", "FR", "NL"]},
    "accelerators": [{"id": "test-acc", "memory_gb": MEMORY_GB, "peak_tflops": {"bf16": 100}, "utilisation": 0.5},
                     {"id": "fast-acc", "memory_gb": MEMORY_GB, "peak_tflops": {"bf16": 200}, "utilisation": 0.5}],
    "node_types": [{"id": "test-node", "accelerator": "test-acc", "accelerators_per_node": PER_NODE,
                    "intra_node_gbps": 1000, "network_gbps": 200, "power_kw_peak": PEAK_KW,
                    "power_kw_idle": 1.5, "checkpoint_write_gbps": 10},
                   {"id": "fast-node", "accelerator": "fast-acc", "accelerators_per_node": PER_NODE,
                    "intra_node_gbps": 1000, "network_gbps": 200, "power_kw_peak": 8.0,
                    "power_kw_idle": 2.0, "checkpoint_write_gbps": 10}],
    "sites": [{"id": "de-site", "jurisdiction": "DE", "node_type": "test-node",
               "nodes_owned": OWNED, "nodes_max": 40,
               "capex": {"node_price": 200000, "network_per_node": 20000},
               "depreciation_months": 60, "residual_fraction": 0.10,
               "facility": {"kind": "colocation", "price_per_kw_month": 150},
               "pue": PUE, "electricity_price_per_kwh": 0.10, "grid_kgco2e_per_kwh": 0.25,
               "power_capacity_kw": 300, "cooling_capacity_kw": 250,
               "utilisation_planned": 0.8, "utilisation_current": CURRENT}],
    "offers": [{"id": "fr-offer", "provider": "test-provider", "region": "test-region-1", "jurisdiction": "FR",
                "node_type": "test-node", "nodes_max": 64, "on_demand_per_accelerator_hour": 3.0,
                "pue": 1.1, "grid_kgco2e_per_kwh": 0.3},
               {"id": "us-offer", "provider": "test-provider", "region": "test-region-2", "jurisdiction": "US",
                "node_type": "test-node", "nodes_max": 64, "on_demand_per_accelerator_hour": 2.5,
                "pue": 1.1, "grid_kgco2e_per_kwh": 0.4}],
}


def base() -> dict[str, Any]:
    return copy.deepcopy(BASE)


def offer_of(catalog: dict[str, Any], venue: str) -> dict[str, Any]:
    found: dict[str, Any] = next(o for o in catalog["offers"] if o["id"] == venue)
    return found


def request(work: dict[str, Any], *, deadline: float | None = None, data: dict[str, Any] | None = None,
            options: dict[str, Any] | None = None, parallelism: str = "auto") -> QuoteRequestIn:
    campaign: dict[str, Any] = {"name": "placement-campaign", "team": "test-team", "work": work,
                                "parallelism": parallelism, "data": data or {}}
    if deadline is not None:
        campaign["deadline_days"] = deadline
    return QuoteRequestIn.model_validate({"campaign": campaign, "options": options or {}})


def body(catalog: dict[str, Any], req: QuoteRequestIn) -> dict[str, Any]:
    return quote(CatalogIn.model_validate(catalog), req)


def evaluate(catalog: dict[str, Any], req: QuoteRequestIn) -> CampaignEvaluation:
    return evaluate_campaign(CatalogIn.model_validate(catalog).to_domain(), *req.to_domain())


def option(document: dict[str, Any], venue: str, term: str) -> dict[str, Any]:
    found: dict[str, Any] = next(o for o in document["options"]
                                 if o["venue"]["id"] == venue and o["term"] == term)
    return found


def flops_for(days: float, accelerators: int) -> float:
    """Model FLOPs that `accelerators` of the test type finish in `days` (no communication: no
    parameters given; no failures: the node types state no MTBF)."""
    return accelerators * SUSTAINED * days * DAY


SMALL = {"kind": "flops", "total_flops": flops_for(2.0, 16)}


# --- residency -----------------------------------------------------------------------------------

def test_groups_expand_to_their_codes_and_single_codes_stand_for_themselves():
    groups = {"WESTBLOC": ("DE", "FR", "NL")}
    assert allowed_jurisdictions(["WESTBLOC", "CH"], groups) == {"DE", "FR", "NL", "CH"}
    assert allowed_jurisdictions(["US"], groups) == {"US"}
    assert allowed_jurisdictions(None, groups) is None  # unrestricted


def test_a_group_admits_its_members_and_rules_out_a_venue_outside_naming_both():
    document = body(base(), request(SMALL, data={"allowed_jurisdictions": ["WESTBLOC"]}))
    us = option(document, "us-offer", "on_demand")
    assert not us["feasible"]
    assert us["reasons"] == ["residency: us-offer processes data in US, outside the allowed jurisdictions (WESTBLOC)"]
    for venue, term in [("fr-offer", "on_demand"), ("de-site", "owned_chargeback")]:
        assert option(document, venue, term)["feasible"], venue


def test_single_codes_rule_out_the_owned_site_outside_them():
    document = body(base(), request(SMALL, data={"allowed_jurisdictions": ["FR", "US"]}))
    for term in ("owned_chargeback", "owned_new_build"):
        site = option(document, "de-site", term)
        assert not site["feasible"]
        assert site["reasons"] == ["residency: de-site processes data in DE, outside the allowed "
                                   "jurisdictions (FR, US)"]
    assert option(document, "fr-offer", "on_demand")["feasible"]
    assert option(document, "us-offer", "on_demand")["feasible"]


def test_the_demo_eea_group_rules_out_only_the_offer_in_the_united_states():
    catalog = json.loads((EXAMPLES / "catalog.json").read_text())
    eea = set(catalog["jurisdiction_groups"]["EEA"])
    assert all(pycountry.countries.get(alpha_2=code) is not None for code in eea)  # ISO 3166-1, per pycountry
    req = QuoteRequestIn.model_validate(json.loads((EXAMPLES / "campaign-owned-wins.json").read_text()))
    assert req.campaign.data.allowed_jurisdictions == ["EEA"]
    document = body(catalog, req)
    for o in document["options"]:
        residency = [r for r in o["reasons"] if r.startswith("residency:")]
        if o["venue"]["jurisdiction"] in eea:
            assert not residency, o["venue"]
        else:
            assert o["venue"]["jurisdiction"] == "US"
            assert residency == [f"residency: {o['venue']['id']} processes data in US, outside the allowed "
                                 "jurisdictions (EEA)"]
    assert any(o["venue"]["jurisdiction"] == "US" for o in document["options"])


def refused(catalog: dict[str, Any], allowed: list[str]) -> dict[str, str]:
    with pytest.raises(InvalidInput) as caught:
        body(catalog, request(SMALL, data={"allowed_jurisdictions": allowed}))
    return {p.field: p.reason for p in caught.value.problems}


def test_a_code_iso_3166_does_not_assign_is_refused_by_its_position():
    assert pycountry.countries.get(alpha_2="QQ") is None  # pycountry: not an assigned alpha-2 code
    assert pycountry.countries.get(alpha_2="DE") is not None  # pycountry: Germany
    problems = refused(base(), ["DE", "QQ"])
    assert set(problems) == {"campaign.data.allowed_jurisdictions.1"}
    assert "'QQ'" in problems["campaign.data.allowed_jurisdictions.1"]


def test_a_group_the_catalog_does_not_define_is_refused_naming_the_groups_it_has():
    problems = refused(base(), ["WESTBLOC", "NORDICS", "FR"])
    assert set(problems) == {"campaign.data.allowed_jurisdictions.1"}
    assert "'NORDICS'" in problems["campaign.data.allowed_jurisdictions.1"]
    assert "WESTBLOC" in problems["campaign.data.allowed_jurisdictions.1"]


def test_owned_only_rules_out_every_rented_option_with_its_reason():
    document = body(base(), request(SMALL, data={"owned_only": True}))
    rented = [o for o in document["options"] if o["venue"]["kind"] == "rented"]
    owned = [o for o in document["options"] if o["venue"]["kind"] == "owned"]
    assert len(rented) == 2 and len(owned) == 2
    for o in rented:
        assert not o["feasible"]
        assert o["reasons"] == ["the request allows owned sites only (data.owned_only)"]
    assert all(o["feasible"] for o in owned)
    assert document["options"][document["recommendation"]["option_index"]]["venue"]["kind"] == "owned"


# --- the screens, each with its reason -----------------------------------------------------------

@pytest.mark.parametrize(("work", "parallelism"), [
    # Activations without recomputation at a 65,536-token context: one layer's attention term
    # alone, split over the node's 4 accelerators, is 5·a·s²/t = 5 × 64 × 65536² / 4 = 344 GB
    # (Korthikanti Table 2) > 90% of 80 GiB = 77.3 GB; no pipeline split divides a layer, and
    # sharding the states cannot shrink it.
    ({"kind": "transformer", "parameters": 1e9, "tokens": 1e10, "layers": 40, "d_model": 8192,
      "sequence_length": 65536, "attention_heads": 64, "activation_recompute": "none"}, "auto"),
    # Replicated: 16 × 4e9 = 64 GB of states + 25% × 80 GiB = 21.5 GB reserve = 85.5 GB > 77.3 GB.
    ({"kind": "flops", "total_flops": 1e20, "parameters": 4e9}, "replicated"),
])
def test_a_model_too_big_for_any_count_is_ruled_out_everywhere_by_memory(work, parallelism):
    document = body(base(), request(work, parallelism=parallelism))
    assert document["recommendation"] is None
    for o in document["options"]:
        assert o["reasons"] == [
            "memory: the model's states and activations do not fit on any number of test-acc accelerators "
            "(80 GiB each) with any tensor, pipeline and data split berth may use here; use full activation "
            "recompute, allow more splits (campaign.parallelism auto, options.layout) or a larger accelerator"]
    assert ("use full activation recompute, let berth split the model (parallelism auto) or use accelerators "
            "with more memory") in document["next_steps"]


def test_a_model_just_small_enough_to_replicate_fits_on_one_node():
    # 16 × 3e9 = 48 GB of states + 21.5 GB reserve = 69.5 GB ≤ 77.3 GB.
    work = {"kind": "flops", "total_flops": 1e20, "parameters": 3e9}
    o = option(body(base(), request(work, parallelism="replicated")), "fr-offer", "on_demand")
    assert o["feasible"] and o["memory"]["fits"] and o["layout"]["strategy"] == "replicated"
    assert o["memory"]["model_state_bytes_per_accelerator"] == 16 * 3e9


def test_full_recompute_as_the_memory_reason_advises_makes_the_big_activation_model_fit():
    # 40 × 2 × 8192 × 8192 = 5.4 GB of layer inputs, well within 72 GB.
    work = {"kind": "transformer", "parameters": 1e9, "tokens": 1e10, "layers": 40, "d_model": 8192,
            "sequence_length": 8192, "activation_recompute": "full"}
    assert option(body(base(), request(work)), "fr-offer", "on_demand")["feasible"]


def test_precision_the_accelerator_has_no_figure_for_is_ruled_out():
    work = {"kind": "flops", "total_flops": 1e20, "precision": "fp8"}
    document = body(base(), request(work, options={"terms": ["on_demand"]}))
    for o in document["options"]:
        assert o["reasons"] == ["precision: accelerator test-acc has no peak figure for the requested precision"]


# 3.8e11 parameters, no architecture (so no tensor or pipeline split): fully sharded (ZeRO-3),
# 16 × 3.8e11 = 6.08e12 bytes of states over (90% − 25%) × 80 GiB = 55.8 GB of room per
# accelerator = 108.9 → 109 replicas → ceil(109 / 4) = 28 nodes at least.
BIG = {"kind": "flops", "total_flops": 1e21, "parameters": 3.8e11}
BIG_NODES = math.ceil(math.ceil(16 * 3.8e11 / ((0.90 - 0.25) * MEMORY_GB * GIB)) / PER_NODE)


def test_capacity_reasons_state_each_venues_limit_against_the_memory_minimum():
    catalog = base()
    offer_of(catalog, "fr-offer")["nodes_max"] = BIG_NODES - 1  # one node short
    offer_of(catalog, "us-offer")["nodes_max"] = BIG_NODES  # just enough
    document = body(catalog, request(BIG))
    free = math.floor(OWNED * (1 - CURRENT))  # chargeback lends owned × (1 − current utilisation): 10
    assert option(document, "de-site", "owned_chargeback")["reasons"] == [
        f"capacity: holding the model needs at least {BIG_NODES} nodes; the site's free nodes are "
        f"{OWNED} owned × (1 − 50.0% current utilisation) = {free}"]
    build = option(document, "de-site", "owned_new_build")["reasons"]
    assert build[0] == (f"capacity: holding the model needs at least {BIG_NODES} nodes; the site has room for "
                        f"40 − {OWNED} owned = {40 - OWNED} new nodes")
    assert option(document, "fr-offer", "on_demand")["reasons"] == [
        f"capacity: holding the model needs at least {BIG_NODES} nodes; the offer's nodes_max is {BIG_NODES - 1}"]
    us = option(document, "us-offer", "on_demand")
    assert us["feasible"] and us["layout"]["nodes"] == BIG_NODES and us["memory"]["fits"]


def test_max_accelerators_caps_every_venue_and_says_so():
    document = body(base(), request(BIG, options={"max_accelerators": 100, "terms": ["on_demand"]}))
    for o in document["options"]:
        assert o["reasons"] == [f"capacity: holding the model needs at least {BIG_NODES} nodes; the request's "
                                f"max_accelerators allows {100 // PER_NODE} nodes"]


def site_with(power_kw: float, cooling_kw: float) -> dict[str, Any]:
    catalog = base()
    site = catalog["sites"][0]
    site.update(nodes_max=100, power_capacity_kw=power_kw, cooling_capacity_kw=cooling_kw)
    return catalog


def new_build(catalog: dict[str, Any]) -> dict[str, Any]:
    return option(body(catalog, request(BIG, options={"terms": ["owned_new_build"]})), "de-site", "owned_new_build")


def test_power_rules_out_a_new_build_the_site_cannot_feed_in_kw():
    # Power allows floor(300 / (6 × 1.2)) − 20 = 21 new nodes < 28; cooling floor(400 / 6) − 20 = 46.
    need = BIG_NODES * PEAK_KW * PUE  # 201.6 kW at the facility
    used = OWNED * PEAK_KW * PUE  # 144 kW for the owned fleet
    o = new_build(site_with(300, 400))
    assert o["reasons"] == [
        f"power: {BIG_NODES} new nodes draw {need:.1f} kW at the facility at peak ({BIG_NODES * PEAK_KW:.1f} kW IT "
        f"× PUE 1.2); the site's 300.0 kW less the owned fleet's {used:.1f} kW leaves {300 - used:.1f} kW, "
        f"{need - (300 - used):.1f} kW short"]
    assert "201.6 kW" in o["reasons"][0] and "45.6 kW short" in o["reasons"][0]


def test_cooling_rules_out_a_new_build_whose_heat_the_site_cannot_remove_in_kw():
    # Cooling allows floor(250 / 6) − 20 = 21 new nodes < 28; power floor(600 / 7.2) − 20 = 63.
    heat, used = BIG_NODES * PEAK_KW, OWNED * PEAK_KW  # 168 kW; 120 kW
    o = new_build(site_with(600, 250))
    assert o["reasons"] == [
        f"cooling: {BIG_NODES} new nodes reject {heat:.1f} kW of heat at peak; the site's 250.0 kW of cooling less "
        f"the owned fleet's {used:.1f} kW leaves {250 - used:.1f} kW, {heat - (250 - used):.1f} kW short"]
    assert "38.0 kW short" in o["reasons"][0]


def test_a_site_with_power_and_cooling_to_spare_builds_the_big_model():
    o = new_build(site_with(600, 400))
    assert o["feasible"] and o["reasons"] == []
    assert o["layout"]["nodes"] >= BIG_NODES


def test_a_deadline_no_layout_meets_states_the_days_past_and_the_accelerators_needed():
    catalog = base()
    offer_of(catalog, "fr-offer")["nodes_max"] = 4  # 16 accelerators at most
    flops = flops_for(19.5, 16)
    document = body(catalog, request({"kind": "flops", "total_flops": flops}, deadline=11,
                                     options={"terms": ["on_demand"]}))
    o = option(document, "fr-offer", "on_demand")
    days = flops / (16 * SUSTAINED) / DAY  # 19.5
    needed = math.ceil(flops / (SUSTAINED * 11 * DAY))  # 16 × 19.5 / 11 = 28.4 → 29 at ideal scaling
    assert not o["feasible"]
    assert o["reasons"] == [
        f"deadline: the fastest layout here (16 accelerators) takes {days:.1f} days, {days - 11:.1f} days past the "
        f"11.0-day deadline; meeting it would take at least {needed} accelerators at ideal scaling"]
    assert option(document, "us-offer", "on_demand")["feasible"]  # 64 nodes meet it


def test_a_deadline_forces_a_larger_layout_than_the_cheapest_without_one():
    # A new build is charged per node carried for its life, so without a deadline one node is
    # cheapest: 4 accelerators taking 80 days. Within 30 days it needs ceil(80 / 30) = 3 nodes.
    flops = flops_for(80.0, PER_NODE)
    work = {"kind": "flops", "total_flops": flops}
    terms = {"terms": ["owned_new_build"]}
    free = option(body(base(), request(work, options=terms)), "de-site", "owned_new_build")
    rushed = option(body(base(), request(work, deadline=30, options=terms)), "de-site", "owned_new_build")
    assert free["feasible"] and rushed["feasible"]
    assert free["layout"]["accelerators"] == PER_NODE
    nodes = math.ceil(80.0 / 30.0)
    assert rushed["layout"]["accelerators"] == nodes * PER_NODE == 12
    assert rushed["timing"]["wall_clock_days"] == pytest.approx(flops / (12 * SUSTAINED) / DAY, abs=1e-4)
    # One node fewer misses the deadline: 8 accelerators take 40 days.
    short = option(body(base(), request(work, deadline=30, options={**terms, "fixed_accelerators": 8})),
                   "de-site", "owned_new_build")
    assert not short["feasible"] and short["reasons"][0].startswith("deadline:")
    assert short["timing"]["wall_clock_days"] == pytest.approx(40.0, abs=1e-4)


# --- nothing feasible ----------------------------------------------------------------------------

def test_nothing_feasible_returns_every_option_with_reasons_and_next_steps_but_no_recommendation():
    catalog = base()
    catalog["sites"] = []
    offer_of(catalog, "fr-offer")["nodes_max"] = 4  # 16 accelerators: 19.5 days
    flops = flops_for(19.5, 16)
    document = body(catalog, request({"kind": "flops", "total_flops": flops}, deadline=11,
                                     data={"allowed_jurisdictions": ["FR"]}, options={"terms": ["on_demand"]}))
    assert document["recommendation"] is None
    assert len(document["options"]) == 2
    assert all(not o["feasible"] and o["reasons"] for o in document["options"])
    assert option(document, "us-offer", "on_demand")["reasons"][0].startswith("residency: us-offer")
    # The US offer is ruled out by residency alone: its hours are the same at any layout,
    # 16 × 19.5 × 24 = 7,488 accelerator-hours at 2.5 EUR.
    us_cost = 16 * 19.5 * 24 * 2.5
    assert document["next_steps"] == [
        f"relax the deadline to {math.ceil(19.5)} days (fr-offer/on_demand can finish by then)",
        f"allow jurisdiction US, if the data's rules permit it: us-offer/on_demand would then cost {us_cost:,.0f} EUR",
    ]


def test_owned_only_with_nothing_owned_that_fits_suggests_allowing_rented_capacity():
    document = body(base(), request(BIG, data={"owned_only": True}))
    assert document["recommendation"] is None
    assert "allow rented capacity (data.owned_only: false)" in document["next_steps"]


# --- ranking -------------------------------------------------------------------------------------

def ranking_catalog() -> dict[str, Any]:
    """Four offers, 16 accelerators each, 100 h of work on the test accelerator (50 h on the fast one)."""
    catalog = base()
    catalog["sites"] = []

    def offer(ident: str, node: str, price: float, grid: float | None) -> dict[str, Any]:
        o = {"id": ident, "provider": "test-provider", "region": ident, "jurisdiction": "DE", "node_type": node,
             "nodes_max": 8, "on_demand_per_accelerator_hour": price, "pue": 1.1}
        if grid is not None:
            o["grid_kgco2e_per_kwh"] = grid
        return o
    catalog["offers"] = [offer("offer-a", "test-node", 2.0, 0.5), offer("offer-b", "fast-node", 5.0, 0.3),
                         offer("offer-c", "test-node", 3.0, 0.05), offer("offer-d", "test-node", 2.6, None)]
    return catalog


# Cost = accelerator-hours × price; wall = 100 h or 50 h; carbon = 4 nodes × peak kW × hours × PUE 1.1
# × grid (busy load 1.0, so a busy node draws its peak).
HOURS = {"offer-a": 100.0, "offer-b": 50.0, "offer-c": 100.0, "offer-d": 100.0}
COST = {"offer-a": 16 * 100 * 2.0, "offer-b": 16 * 50 * 5.0, "offer-c": 16 * 100 * 3.0, "offer-d": 16 * 100 * 2.6}
CARBON = {"offer-a": 4 * 6.0 * 100 * 1.1 * 0.5, "offer-b": 4 * 8.0 * 50 * 1.1 * 0.3,
          "offer-c": 4 * 6.0 * 100 * 1.1 * 0.05, "offer-d": math.inf}  # no grid factor: unknown, sorts last


def ranked(rank_by: str) -> dict[str, Any]:
    work = {"kind": "flops", "total_flops": 16 * SUSTAINED * 100 * 3600}
    return body(ranking_catalog(), request(work, options={"terms": ["on_demand"], "fixed_accelerators": 16,
                                                          "rank_by": rank_by}))


@pytest.mark.parametrize(("rank_by", "key"), [
    ("cost", lambda v: (COST[v], HOURS[v], CARBON[v])),
    ("wall_clock", lambda v: (HOURS[v], COST[v], CARBON[v])),
    ("carbon", lambda v: (CARBON[v], COST[v], HOURS[v])),
])
def test_rank_by_orders_the_feasible_options_by_its_key_then_the_others(rank_by, key):
    expected = sorted(HOURS, key=key)
    document = ranked(rank_by)
    assert [o["venue"]["id"] for o in document["options"]] == expected
    assert [o["rank"] for o in document["options"]] == [1, 2, 3, 4]
    for o in document["options"]:
        v = o["venue"]["id"]
        assert o["cost"]["total"] == pytest.approx(COST[v], abs=0.01)
        assert o["timing"]["wall_clock_days"] == pytest.approx(HOURS[v] / 24, abs=1e-4)
        if math.isfinite(CARBON[v]):
            assert o["energy"]["kgco2e"] == pytest.approx(CARBON[v], abs=0.1)
        else:
            assert o["energy"]["kgco2e"] is None
    assert document["recommendation"]["venue"] == expected[0]


def test_the_orders_differ_so_each_key_really_moves_the_ranking():
    firsts = {rank_by: ranked(rank_by)["recommendation"]["venue"] for rank_by in ("cost", "wall_clock", "carbon")}
    assert firsts == {"cost": "offer-a", "wall_clock": "offer-b", "carbon": "offer-c"}


@pytest.mark.parametrize(("rank_by", "words"), [
    ("cost", f"offer-a/on_demand costs 3,200 EUR, 800 EUR ({800 / 4000:.1%}) less than the runner-up "
             "offer-b/on_demand"),
    ("wall_clock", f"offer-b/on_demand finishes in {50 / 24:.1f} days against {100 / 24:.1f} for offer-a/on_demand"),
    ("carbon", f"offer-c/on_demand emits {CARBON['offer-c']:,.0f} kgCO2e against {CARBON['offer-b']:,.0f} for "
               "offer-b/on_demand"),
])
def test_the_recommendations_why_names_the_runner_up_on_the_ranking_key(rank_by, words):
    assert ranked(rank_by)["recommendation"]["why"].startswith(words)


def test_screens_are_reported_in_the_order_people_should_read_them():
    mask = screens.DEADLINE | screens.RESIDENCY | screens.CAPACITY
    assert screens.names(mask) == [screens.RESIDENCY, screens.CAPACITY, screens.DEADLINE]
    evaluation = evaluate(base(), request(SMALL, data={"allowed_jurisdictions": ["DE"]}))
    us = next(o for o in evaluation.options if o.venue_id == "us-offer")
    assert screens.names(int(us.screens[0])) == [screens.RESIDENCY]
    assert not bool(np.asarray(us.feasible)[0])


# --- a pinned accelerator count the venue cannot give --------------------------------------------

def test_pinning_more_accelerators_than_an_offer_has_is_not_feasible():
    # fr-offer has 64 nodes × 4 = 256 accelerators; 300 would need 75 nodes.
    document = body(base(), request(SMALL, options={"terms": ["on_demand"], "fixed_accelerators": 300}))
    fr = option(document, "fr-offer", "on_demand")
    assert fr["layout"]["nodes"] == math.ceil(300 / PER_NODE) > 64
    assert not fr["feasible"]
    assert fr["reasons"] == ["capacity: the pinned layout needs 75 nodes; the offer's nodes_max is 64"]


def test_pinning_fewer_accelerators_than_the_model_needs_is_not_feasible():
    document = body(base(), request(BIG, options={"terms": ["on_demand"], "fixed_accelerators": 4}))
    us = option(document, "us-offer", "on_demand")
    assert us["layout"]["accelerators"] == 4 < BIG_NODES * PER_NODE
    assert not us["memory"]["fits"]
    assert not us["feasible"]
    assert len(us["reasons"]) == 1
    assert us["reasons"][0].startswith(f"memory: the pinned 4 accelerators cannot hold the model's states and "
                                       f"activations; it needs at least {BIG_NODES} nodes")
