"""Compare and re-quote: a budget reviewer sees what moved between two stored quotes (the
recommendation, each option's total, days and layout, break-even, and the inputs and catalog figures
behind it) and re-quotes a stored request against a newer catalog in one call."""

import copy
from typing import Any

import httpx
import pytest

from tests.api.conftest import FakeClock

pytestmark = pytest.mark.anyio


async def create(client: httpx.AsyncClient, request: dict[str, Any]) -> dict[str, Any]:
    response = await client.post("/v1/quotes", json=request)
    assert response.status_code == 201, response.text
    body: dict[str, Any] = response.json()
    return body


def dearer_fjordvik_power(catalog: dict[str, Any], price: float) -> dict[str, Any]:
    changed = copy.deepcopy(catalog)
    changed["name"] = "dearer-power"
    site = next(s for s in changed["sites"] if s["id"] == "fjordvik-hall")
    site["electricity_price_per_kwh"] = price
    return changed


async def test_a_quote_compared_with_itself_shows_no_change(client: httpx.AsyncClient,
                                                            owned_wins_request: dict[str, Any]) -> None:
    quote = await create(client, owned_wins_request)
    comparison = (await client.get(f"/v1/quotes/{quote['id']}/compare/{quote['id']}")).json()
    assert comparison["changed"] is False
    assert comparison["inputs_changed"] == [] and comparison["breakeven_changed"] == []
    assert comparison["catalog_changed"] == []
    assert all(not o["changed"] and o["total_change"] == 0 for o in comparison["options"])


async def test_changed_inputs_and_what_they_moved_are_listed(
    client: httpx.AsyncClient, clock: FakeClock, owned_wins_request: dict[str, Any]
) -> None:
    a = await create(client, owned_wins_request)
    clock.advance(minutes=1)
    longer = copy.deepcopy(owned_wins_request)
    longer["campaign"]["work"]["tokens"] *= 2
    b = await create(client, longer)
    comparison = (await client.get(f"/v1/quotes/{a['id']}/compare/{b['id']}")).json()
    assert comparison["changed"] is True
    tokens = owned_wins_request["campaign"]["work"]["tokens"]
    assert {"path": "request.campaign.work.tokens", "a": tokens, "b": tokens * 2} in comparison["inputs_changed"]
    by_option = {o["option"]: o for o in comparison["options"]}
    assert set(by_option) == {f"{o['venue']['id']}/{o['term']}" for o in a["options"]}
    for option_a in a["options"]:
        option_b = next(o for o in b["options"] if (o["venue"], o["term"]) == (option_a["venue"], option_a["term"]))
        row = by_option[f"{option_a['venue']['id']}/{option_a['term']}"]
        assert row["a"]["total"] == option_a["cost"]["total"] and row["b"]["total"] == option_b["cost"]["total"]
        assert row["total_change"] == pytest.approx(option_b["cost"]["total"] - option_a["cost"]["total"])
        assert row["wall_clock_days_change"] == pytest.approx(
            option_b["timing"]["wall_clock_days"] - option_a["timing"]["wall_clock_days"])
        assert {c["field"] for c in row["layout_changes"]} == {
            k for k in option_a["layout"] if option_a["layout"][k] != option_b["layout"][k]}
    assert comparison["recommendation"]["a"]["option"] == "fjordvik-hall/owned_chargeback"


async def test_requote_against_a_newer_catalog_stores_a_new_quote_and_explains_the_move(
    client: httpx.AsyncClient, clock: FakeClock, demo_catalog: dict[str, Any], owned_wins_request: dict[str, Any]
) -> None:
    old = await create(client, owned_wins_request)
    fjordvik_price = next(s for s in demo_catalog["sites"] if s["id"] == "fjordvik-hall")["electricity_price_per_kwh"]
    newer = (await client.post("/v1/catalogs", json=dearer_fjordvik_power(demo_catalog, 0.40))).json()
    clock.advance(minutes=1)
    response = await client.post(f"/v1/quotes/{old['id']}/requote", json={"catalog_id": newer["id"]})
    assert response.status_code == 201, response.text
    new, comparison = response.json()["quote"], response.json()["comparison"]
    assert response.headers["location"] == f"/v1/quotes/{new['id']}"
    assert (new["catalog_id"], new["request"]["campaign"]) == (newer["id"], old["request"]["campaign"])
    assert (await client.get(f"/v1/quotes/{new['id']}")).json() == new
    assert {"path": "catalog_id", "a": old["catalog_id"], "b": newer["id"]} in comparison["inputs_changed"]
    assert {"path": "catalog.sites.fjordvik-hall.electricity_price_per_kwh", "a": fjordvik_price, "b": 0.40} in \
        [{k: c[k] for k in ("path", "a", "b")} for c in comparison["catalog_changed"]]
    fjordvik = next(o for o in comparison["options"] if o["option"] == "fjordvik-hall/owned_chargeback")
    assert fjordvik["total_change"] > 0  # dearer power, dearer hall
    assert comparison["recommendation"]["changed"] is True
    assert comparison["recommendation"]["b"]["option"] != "fjordvik-hall/owned_chargeback"
    # The same as GET .../compare/... between the two stored quotes.
    assert (await client.get(f"/v1/quotes/{old['id']}/compare/{new['id']}")).json() == comparison


async def test_requote_refuses_a_retired_catalog_and_an_unknown_one(
    client: httpx.AsyncClient, demo_catalog: dict[str, Any], owned_wins_request: dict[str, Any]
) -> None:
    old = await create(client, owned_wins_request)
    newer = (await client.post("/v1/catalogs", json=dearer_fjordvik_power(demo_catalog, 0.40))).json()
    await client.patch(f"/v1/catalogs/{newer['id']}", json={"status": "retired"})
    retired = await client.post(f"/v1/quotes/{old['id']}/requote", json={"catalog_id": newer["id"]})
    assert retired.status_code == 422 and "is retired" in retired.json()["errors"][0]["reason"]
    unknown = await client.post(f"/v1/quotes/{old['id']}/requote", json={"catalog_id": "cat_nothing"})
    assert unknown.status_code == 422
    missing = await client.post("/v1/quotes/q_nothing/requote", json={"catalog_id": newer["id"]})
    assert missing.status_code == 404
    assert len((await client.get("/v1/quotes")).json()["items"]) == 1  # nothing new stored


async def test_a_requote_is_idempotent_per_quote_and_key(
    client: httpx.AsyncClient, clock: FakeClock, demo_catalog: dict[str, Any], owned_wins_request: dict[str, Any]
) -> None:
    first = await create(client, owned_wins_request)
    clock.advance(seconds=1)
    second = await create(client, owned_wins_request)
    newer = (await client.post("/v1/catalogs", json=dearer_fjordvik_power(demo_catalog, 0.30))).json()
    headers = {"Idempotency-Key": "requote-1"}
    body = {"catalog_id": newer["id"]}
    once = await client.post(f"/v1/quotes/{first['id']}/requote", json=body, headers=headers)
    again = await client.post(f"/v1/quotes/{first['id']}/requote", json=body, headers=headers)
    assert (once.status_code, again.status_code) == (201, 201)
    assert again.json() == once.json() and again.headers["berth-replayed"] == "true"
    # The same key and body for another quote is another request, refused like any reused key.
    other = await client.post(f"/v1/quotes/{second['id']}/requote", json=body, headers=headers)
    assert other.status_code == 422
    summary = await client.post(f"/v1/quotes/{first['id']}/requote", json=body, params={"view": "summary"})
    assert summary.json()["quote"]["view"] == "summary"
