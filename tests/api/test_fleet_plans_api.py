"""POST /v1/fleet-plans and GET /v1/fleet-plans/{id} (api.md, Fleet plans)."""

import copy
from typing import Any

import httpx
import pytest

from service.contract.answers import FleetPlanOut
from service.contract.catalog import CatalogIn
from service.contract.fleet import FleetPlanIn
from service.usecases.fleet_plans import FleetLimits, fleet_plan
from tests.conftest import load_example

pytestmark = pytest.mark.anyio
PROBLEM = "application/problem+json"


def plan_request(**changes: Any) -> dict[str, Any]:
    request = copy.deepcopy(load_example("fleet-plan.json"))
    request.update({"samples": 200, **changes})
    return request


async def test_a_plan_is_stored_and_answers_every_candidate_size(client: httpx.AsyncClient) -> None:
    response = await client.post("/v1/fleet-plans", json=plan_request())
    assert response.status_code == 201, response.text
    plan = response.json()
    assert response.headers["location"] == f"/v1/fleet-plans/{plan['id']}"
    sizes = [c["nodes"] for c in plan["candidates"]]
    assert sizes == list(range(0, 97, 2))
    best = next(c for c in plan["candidates"] if c["nodes"] == plan["best_nodes"])
    # The best size has the lowest expected present cost of the feasible sizes.
    assert best["present_cost_mean"] == min(c["present_cost_mean"] for c in plan["candidates"] if c["feasible"])
    assert all(c["present_cost_p5"] <= c["present_cost_p50"] <= c["present_cost_p95"]
               for c in plan["candidates"] if c["feasible"])
    assert 0.0 <= plan["probability_owning_beats_renting"] <= 1.0
    assert len(plan["months"]) == 48
    month = plan["months"][0]
    assert month["owned_accelerator_hours"] + month["rented_accelerator_hours"] == pytest.approx(
        month["demand_accelerator_hours"], abs=0.2)
    stored = await client.get(f"/v1/fleet-plans/{plan['id']}")
    assert stored.status_code == 200
    assert stored.json() == plan
    FleetPlanOut.model_validate(plan)  # the answer is what the OpenAPI documents
    schema = (await client.get("/openapi.json")).json()
    documented = schema["paths"]["/v1/fleet-plans"]["post"]["responses"]["201"]["content"]["application/json"]
    assert documented["schema"]["$ref"].endswith("/FleetPlanOut")


async def test_sizes_beyond_the_sites_power_are_marked_infeasible(client: httpx.AsyncClient) -> None:
    # fjordvik-hall: 1,200 kW of facility power / (10.2 kW × PUE 1.15) = 102 nodes; nodes_max 96.
    response = await client.post("/v1/fleet-plans", json=plan_request(candidate_nodes={"min": 90, "max": 110}))
    assert response.status_code == 201, response.text
    rows = {c["nodes"]: c for c in response.json()["candidates"]}
    assert rows[96]["feasible"] and not rows[97]["feasible"]
    assert "nodes_max" in rows[97]["reason"]
    # Every size has the same fields (api.md), empty where infeasible; money carries its currency.
    assert set(rows[97]) == set(rows[96]) and rows[97]["present_cost_p50"] is None
    plan = response.json()
    assert {c["currency"] for c in plan["candidates"]} == {m["currency"] for m in plan["months"]} == {"EUR"}


async def test_a_plan_over_the_size_limit_is_refused_naming_the_limit(client: httpx.AsyncClient) -> None:
    response = await client.post("/v1/fleet-plans", json=plan_request(samples=2_000_000,
                                                                        candidate_nodes={"min": 0, "max": 96}))
    assert response.status_code == 422
    assert response.headers["content-type"] == PROBLEM
    assert "exceed the limit of 50,000,000" in response.json()["errors"][0]["reason"]


async def test_unknown_venues_and_terms_are_named(client: httpx.AsyncClient) -> None:
    response = await client.post("/v1/fleet-plans", json=plan_request(site="nowhere", offer="nobody"))
    assert response.status_code == 422
    assert {e["field"] for e in response.json()["errors"]} == {"site", "offer"}
    response = await client.post("/v1/fleet-plans", json=plan_request(term="committed_24m"))
    assert response.status_code == 422
    assert response.json()["errors"][0]["field"] == "term"


async def test_demand_can_come_from_stored_recurring_quotes(client: httpx.AsyncClient) -> None:
    quote = await client.post("/v1/quotes", json=load_example("campaign-recurring.json"))
    assert quote.status_code == 201
    body = quote.json()
    hours = next(o["timing"]["accelerator_hours"] for o in body["options"]
                 if o["venue"]["id"] == "fjordvik-hall" and o["term"] == "owned_chargeback")
    request = plan_request(demand={"from_quotes": [body["id"]]}, horizon_months=48)
    response = await client.post("/v1/fleet-plans", json=request)
    assert response.status_code == 201, response.text
    months = response.json()["months"]
    # Monthly recurrence for 36 months: that campaign's hours every month, then nothing.
    assert months[0]["demand_accelerator_hours"] == pytest.approx(hours, rel=1e-6)
    assert months[35]["demand_accelerator_hours"] == pytest.approx(hours, rel=1e-6)
    assert months[36]["demand_accelerator_hours"] == 0.0
    missing = await client.post("/v1/fleet-plans", json=plan_request(demand={"from_quotes": ["q_missing"]}))
    assert missing.status_code == 422
    assert missing.json()["errors"][0]["field"] == "demand.from_quotes.0"


async def test_an_unknown_plan_is_a_problem_404(client: httpx.AsyncClient) -> None:
    response = await client.get("/v1/fleet-plans/fp_nothing")
    assert response.status_code == 404
    assert response.headers["content-type"] == PROBLEM


async def test_flat_demand_filling_todays_fleet_is_one_stage_with_nothing_added(client: httpx.AsyncClient) -> None:
    # fjordvik-hall owns 32 nodes of 8 accelerators: 32 × 8 × 730 h × 0.85 usable = 158,848 h a month.
    request = plan_request(demand={"accelerator_hours_first_month": 158_848.0})
    response = await client.post("/v1/fleet-plans", json=request)
    assert response.status_code == 201, response.text
    plan = response.json()
    assert plan["nodes_owned"] == 32 and plan["decision_every_months"] == 12
    assert plan["stages"] == [{**plan["stages"][0], "month": 1, "until_month": 48, "nodes": 32, "added": 0,
                               "retired": 0}]
    assert plan["single_purchase"]["nodes"] == plan["best_nodes"] == 32
    assert plan["staged"]["present_cost_mean"] == plan["single_purchase"]["present_cost_mean"]
    assert [y["capital"] for y in plan["cash_flow"]] == [0.0, 0.0, 0.0, 0.0]
    # Rounded for people: utilisation to 4 decimals.
    assert plan["months"][0]["utilisation"] == round(plan["months"][0]["utilisation"], 4)


async def test_growing_demand_is_met_by_additions_at_later_decision_points(client: httpx.AsyncClient) -> None:
    response = await client.post("/v1/fleet-plans", json=plan_request())  # doubling every 18 months
    assert response.status_code == 201, response.text
    plan = response.json()
    nodes = [st["nodes"] for st in plan["stages"]]
    assert nodes == sorted(nodes) and len(nodes) > 1
    assert all(st["month"] > 1 and st["added"] > 0 and st["retired"] == 0 for st in plan["stages"][1:])
    assert plan["staged"]["present_cost_mean"] <= plan["single_purchase"]["present_cost_mean"]
    assert plan["staged"]["saving_vs_single_purchase"] >= 0
    assert [y["year"] for y in plan["cash_flow"]] == [1, 2, 3, 4]
    purchases = sum(st["purchase"] for st in plan["stages"])
    assert sum(y["capital"] for y in plan["cash_flow"]) == pytest.approx(purchases, abs=0.05)
    assert plan["assumptions"][0]["name"] == "resale_fraction"
    # Every month of a stage holds its nodes.
    for st in plan["stages"]:
        assert {m["nodes"] for m in plan["months"][st["month"] - 1:st["until_month"]]} == {st["nodes"]}


async def test_decisions_may_come_every_month_within_the_limit(client: httpx.AsyncClient) -> None:
    response = await client.post("/v1/fleet-plans", json=plan_request(decision_every_months=1))
    assert response.status_code == 201, response.text
    assert response.json()["stages"][-1]["month"] > 37  # finer decisions follow demand more closely
    response = await client.post("/v1/fleet-plans", json=plan_request(decision_every_months=0))
    assert response.status_code == 422
    assert response.json()["errors"][0]["field"] == "decision_every_months"


def test_a_sites_own_resale_fraction_replaces_the_listed_default() -> None:
    catalog = load_example("catalog.json")
    site = next(s for s in catalog["sites"] if s["id"] == "fjordvik-hall")
    site["resale_fraction"] = 0.4
    body = fleet_plan(CatalogIn.model_validate(catalog), FleetPlanIn.model_validate(plan_request()),
                      limits=FleetLimits())
    assert body["resale_per_node"] == 0.4 * site["capex"]["node_price"]
    assert body["assumptions"] == []
    default = fleet_plan(CatalogIn.model_validate(load_example("catalog.json")),
                         FleetPlanIn.model_validate(plan_request()), limits=FleetLimits())
    assert [a["name"] for a in default["assumptions"]] == ["resale_fraction"]
    assert default["resale_per_node"] == 0.25 * site["capex"]["node_price"]
