"""The quote document (api.md, "The quote response") built from the demo catalog and campaigns
in pricing_examples/ through `service.usecases.quoting.quote`.

Money is rounded to the currency's ISO 4217 minor unit (ISO 4217:2015, the list of currency
codes and minor units: EUR 2, JPY 0), read from babel's `get_currency_precision` as the
reference table.
"""

import copy
import json
import re
from decimal import Decimal
from functools import cache
from pathlib import Path
from typing import Any

import pytest
from babel.numbers import get_currency_precision

from service.contract.catalog import CatalogIn
from service.contract.request import QuoteRequestIn
from service.usecases.quoting import quote

EXAMPLES = Path(__file__).resolve().parents[2] / "pricing_examples"
CAMPAIGNS = ["owned-wins", "renting-wins", "residency-blocked", "recurring"]
WITH_A_WINNER = ["owned-wins", "renting-wins", "recurring"]

OPTION_KEYS = {
    "venue": {"kind", "id", "jurisdiction"},
    "layout": {"nodes", "accelerators", "tensor", "pipeline", "data", "zero_stage", "sequence_parallel",
               "micro_batch", "micro_batches", "pipeline_bubble_fraction", "decided_by", "strategy", "shards"},
    "memory": {"model_state_bytes_per_accelerator", "activation_bytes_per_accelerator", "fits"},
    "timing": {"step_seconds", "compute_seconds", "pipeline_bubble_seconds", "collectives", "scaling_efficiency",
               "exposed_communication_fraction",
               "network_gbps_needed_for_95pct", "failure_overhead_fraction", "checkpoint_interval_hours",
               "wall_clock_days", "accelerator_hours"},
    "energy": {"it_kwh", "facility_kwh", "peak_it_kw", "cooling_kw_thermal", "cooling_tons", "kgco2e"},
    "cost": {"total", "per_instance_total", "programme_total", "npv", "view", "full_total", "incremental_total",
             "per_accelerator_hour", "lines"},
}


def catalog_data() -> dict[str, Any]:
    data: dict[str, Any] = json.loads((EXAMPLES / "catalog.json").read_text())
    return data


@cache
def document(campaign: str, currency: str = "EUR") -> dict[str, Any]:
    data = catalog_data()
    data["currency"] = currency
    request = QuoteRequestIn.model_validate(json.loads((EXAMPLES / f"campaign-{campaign}.json").read_text()))
    return quote(CatalogIn.model_validate(data), request)


def options(campaign: str) -> list[dict[str, Any]]:
    result: list[dict[str, Any]] = copy.deepcopy(document(campaign)["options"])
    return result


def label(option: dict[str, Any]) -> str:
    return f"{option['venue']['id']}/{option['term']}"


@pytest.mark.parametrize("campaign", CAMPAIGNS)
def test_every_option_carries_the_fields_of_the_api_contract(campaign):
    found = options(campaign)
    assert found
    for option in found:
        assert {"venue", "term", "feasible", "reasons", "layout", "memory", "timing", "energy", "cost"} <= set(option)
        for group, keys in OPTION_KEYS.items():
            assert keys <= set(option[group]), (group, keys - set(option[group]))
        assert option["venue"]["kind"] in {"owned", "rented"}
        layout = option["layout"]
        assert layout["strategy"] in {"replicated", "sharded", "tensor-pipeline-data"}
        assert layout["tensor"] * layout["pipeline"] * layout["data"] == layout["accelerators"]
        assert layout["decided_by"] in {"memory", "deadline", "node_limit", "cost", "pinned"}
        for line in option["cost"]["lines"]:
            assert set(line) >= {"item", "amount", "basis"} and line["basis"]


def test_every_venue_and_term_of_the_catalog_is_an_option():
    catalog = catalog_data()
    terms = len(catalog["sites"]) * 2
    for offer in catalog["offers"]:
        terms += (offer.get("on_demand_per_accelerator_hour") is not None) + len(offer.get("committed", []))
        terms += offer.get("interruptible") is not None
    assert terms == 2 * 2 + (1 + 2 + 1) + (1 + 1 + 1) * 2
    for campaign in CAMPAIGNS:
        assert len(options(campaign)) == terms


@pytest.mark.parametrize("campaign", CAMPAIGNS)
def test_cost_lines_add_up_to_the_total_within_one_minor_unit_per_line(campaign):
    unit = 10.0 ** -get_currency_precision("EUR")
    for option in options(campaign):
        lines = option["cost"]["lines"]
        assert lines
        assert abs(sum(line["amount"] for line in lines) - option["cost"]["total"]) <= unit * len(lines)


@pytest.mark.parametrize("campaign", CAMPAIGNS)
def test_feasible_options_come_first_ranked_by_total(campaign):
    found = options(campaign)
    feasible = [o for o in found if o["feasible"]]
    assert found[: len(feasible)] == feasible
    assert [o["rank"] for o in feasible] == list(range(1, len(feasible) + 1))
    totals = [o["cost"]["programme_total"] for o in feasible]
    assert totals == sorted(totals)
    assert all(o["rank"] is None for o in found[len(feasible):])


@pytest.mark.parametrize("campaign", CAMPAIGNS)
def test_every_infeasible_option_says_why(campaign):
    for option in options(campaign):
        if not option["feasible"]:
            assert option["reasons"] and all(isinstance(r, str) and r for r in option["reasons"])
        else:
            assert option["reasons"] == []


@pytest.mark.parametrize("campaign", WITH_A_WINNER)
def test_the_recommendation_is_the_cheapest_feasible_option_and_names_the_runner_up(campaign):
    body = document(campaign)
    feasible = [o for o in body["options"] if o["feasible"]]
    assert len(feasible) >= 2
    cheapest = min(feasible, key=lambda o: o["cost"]["total"])
    recommendation = body["recommendation"]
    assert body["options"][recommendation["option_index"]] == cheapest
    assert (recommendation["venue"], recommendation["term"]) == (cheapest["venue"]["id"], cheapest["term"])
    assert label(feasible[1]) in recommendation["why"]
    assert body["next_steps"] == []


@pytest.mark.parametrize(("campaign", "kind"), [("owned-wins", "owned"), ("renting-wins", "rented")])
def test_the_demo_campaigns_are_won_by_the_kind_of_venue_their_names_say(campaign, kind):
    body = document(campaign)
    assert body["options"][body["recommendation"]["option_index"]]["venue"]["kind"] == kind


def test_a_campaign_no_venue_may_hold_gets_no_recommendation_but_next_steps_naming_a_jurisdiction():
    body = document("residency-blocked")
    assert body["recommendation"] is None
    assert not any(o["feasible"] for o in body["options"])
    assert all(any(r.startswith("residency:") for r in o["reasons"]) for o in body["options"])
    steps = body["next_steps"]
    assert steps
    venues = {o["venue"]["jurisdiction"] for o in body["options"]}
    named = {code for step in steps for code in re.findall(r"\bjurisdiction ([A-Z]{2})\b", step)}
    assert named and named <= venues
    assert not named & {"CH", "LI"}  # the allowed ones are not what is missing


@pytest.mark.parametrize("campaign", CAMPAIGNS)
def test_every_assumption_has_a_name_value_unit_and_source(campaign):
    assumptions = document(campaign)["assumptions"]
    assert assumptions
    for a in assumptions:
        assert set(a) >= {"name", "value", "unit", "source"}
        assert isinstance(a["value"], int | float)
        assert all(isinstance(a[k], str) and a[k] for k in ("name", "unit", "source"))
    names = [a["name"] for a in assumptions]
    assert len(names) == len(set(names))


def test_the_cautions_disclaim_vendor_quotes_engineering_sign_off_and_legal_advice():
    cautions = " ".join(document("owned-wins")["cautions"])
    for phrase in ("not a vendor quote", "licensed engineers", "not legal advice"):
        assert phrase in cautions


def money_amounts(body: dict[str, Any]) -> list[float]:
    amounts = []
    for option in body["options"]:
        amounts.append(option["cost"]["total"])
        amounts += [line["amount"] for line in option["cost"]["lines"]]
    amounts += [row["owned_fixed_per_month"] for row in body["breakeven"]]
    return [a for a in amounts if a is not None]


def whole_minor_units(amount: float, digits: int) -> bool:
    """The shortest decimal that reads back as `amount` has at most `digits` decimals."""
    exponent = Decimal(repr(amount)).normalize().as_tuple().exponent
    assert isinstance(exponent, int)
    return -exponent <= digits


@pytest.mark.parametrize("campaign", CAMPAIGNS)
def test_money_is_rounded_to_the_two_decimals_of_the_euro(campaign):
    digits = get_currency_precision("EUR")
    assert digits == 2  # ISO 4217: EUR has a minor unit of 2
    body = document(campaign)
    assert body["currency"] == "EUR"
    amounts = money_amounts(body)
    assert amounts
    assert all(whole_minor_units(a, digits) for a in amounts)
    assert any(not whole_minor_units(a, 0) for a in amounts)  # cents are kept, not dropped


def test_money_in_a_currency_without_a_minor_unit_is_rounded_to_whole_units():
    digits = get_currency_precision("JPY")
    assert digits == 0  # ISO 4217: JPY has a minor unit of 0
    body = document("owned-wins", "JPY")
    assert body["currency"] == "JPY"
    assert all(whole_minor_units(a, digits) for a in money_amounts(body))
    euro = document("owned-wins")
    for yen_option, euro_option in zip(body["options"], euro["options"], strict=True):
        assert abs(yen_option["cost"]["total"] - euro_option["cost"]["total"]) <= 0.505 + 1e-9


@pytest.mark.parametrize("campaign", ["owned-wins", "recurring"])
def test_the_breakeven_table_pairs_every_site_only_with_rented_options_that_passed_every_screen(campaign):
    body = document(campaign)
    passed = {(o["venue"]["id"], o["term"]) for o in body["options"]
              if o["venue"]["kind"] == "rented" and o["feasible"]}
    ruled_out = {(o["venue"]["id"], o["term"]) for o in body["options"]
                 if o["venue"]["kind"] == "rented" and not o["feasible"]}
    assert passed and ruled_out  # the US offer is ruled out by residency in both
    sites = {o["venue"]["id"] for o in body["options"] if o["venue"]["kind"] == "owned"}
    rows = [(r["site"], r["offer"], r["term"]) for r in body["breakeven"]]
    assert len(rows) == len(set(rows)) == len(sites) * len(passed)
    assert set(rows) == {(s, offer, term) for s in sites for offer, term in passed}
    assert not {(offer, term) for _, offer, term in rows} & ruled_out
    left_out = {(r["offer"], r["term"]): r["reasons"] for r in body["breakeven_left_out"]}
    assert set(left_out) == ruled_out and all(left_out.values())


@pytest.mark.parametrize("campaign", ["owned-wins", "recurring"])
def test_each_rented_price_is_the_listed_price_converted_per_unit_of_work_and_shows_how(campaign):
    body = document(campaign)
    catalog = catalog_data()
    offers = {o["id"]: o for o in catalog["offers"]}
    accelerators = {a["id"]: a for a in catalog["accelerators"]}
    node_types = {n["id"]: n for n in catalog["node_types"]}
    sites = {s["id"]: s for s in catalog["sites"]}

    def sustained(node_type: str) -> float:
        accelerator = accelerators[node_types[node_type]["accelerator"]]
        return float(accelerator["peak_tflops"]["bf16"] * accelerator["utilisation"])

    for row in body["breakeven"]:
        offer = offers[row["offer"]]
        if row["term"] == "on_demand":
            listed = offer["on_demand_per_accelerator_hour"]
        elif row["term"] == "interruptible":
            listed = offer["interruptible"]["per_accelerator_hour"]
        else:
            committed = next(c for c in offer["committed"] if f"committed_{c['months']}m" == row["term"])
            listed = committed["per_accelerator_hour"]
            assert "at full use of the commitment" in row["note"]
            if committed.get("upfront_fraction", 0.0) == 0.0:
                assert row["rented_listed_per_accelerator_hour"] == pytest.approx(listed, rel=1e-9)
            else:  # financed up-front share: dearer than listed, never cheaper
                assert row["rented_listed_per_accelerator_hour"] > listed
            listed = row["rented_listed_per_accelerator_hour"]
        assert row["rented_listed_per_accelerator_hour"] == pytest.approx(listed, rel=1e-9)
        speed = sustained(sites[row["site"]]["node_type"]) / sustained(offer["node_type"])
        if row["term"] == "interruptible":
            assert row["conversion"] >= speed * (1 - 1e-6)  # plus the hours interruptions lose
            assert "interruptions" in row["conversion_basis"]
        else:
            assert row["conversion"] == pytest.approx(speed, rel=1e-6)
        assert row["rented_per_accelerator_hour"] == pytest.approx(
            row["rented_listed_per_accelerator_hour"] * row["conversion"], rel=1e-3, abs=1e-4)
        assert f"{row['rented_per_accelerator_hour']:,.4f}" in row["conversion_basis"]


def test_the_recurring_demo_campaign_leads_with_its_programme():
    body = document("recurring")
    instances = body["work"]["instances"]
    assert instances == 36
    for option in body["options"]:
        cost = option["cost"]
        assert cost["per_instance_total"] == cost["total"]
        # Every commitment of the demo is filled by whole instances: no unused remainder.
        assert cost["programme_total"] == pytest.approx(instances * cost["per_instance_total"], abs=0.01 * instances)
    best = body["options"][body["recommendation"]["option_index"]]
    assert best["term"] == "owned_new_build"
    why = body["recommendation"]["why"]
    assert f"{best['cost']['programme_total']:,.0f} EUR over the programme of 36 instances" in why
    site = next(s for s in catalog_data()["sites"] if s["id"] == best["venue"]["id"])
    capex = sum(site["capex"].values()) * best["layout"]["nodes"]
    assert f"{capex:,.0f} EUR of capital when bought" in why
    assert best["cash_flow"][0]["capital"] == pytest.approx(capex)
    assert best["cash_flow"][-1]["capital"] == pytest.approx(-capex * site["residual_fraction"])


@pytest.mark.parametrize("campaign", CAMPAIGNS)
def test_each_years_cash_flow_adds_up(campaign):
    for option in options(campaign):
        assert option["cash_flow"] and [y["year"] for y in option["cash_flow"]] == list(
            range(1, len(option["cash_flow"]) + 1))
        for year in option["cash_flow"]:
            assert year["total"] == pytest.approx(year["capital"] + year["operating"] + year["rent"], abs=0.015)
