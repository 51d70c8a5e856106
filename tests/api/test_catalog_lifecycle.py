"""The catalog lifecycle: one default, set only by an admin; uploads (new or identical) never move it;
retired and not-yet-effective (or expired) catalogs are refused by name. (With a real server, the
README's example after a second upload: tests/e2e/test_second_catalog.py.)"""

import copy
import json
from typing import Any

import httpx
import pytest
from fastapi import FastAPI

from service.usecases.access import issue_key
from tests.api.conftest import FakeClock
from tests.conftest import EXAMPLES

pytestmark = pytest.mark.anyio


def problem_fields(response: httpx.Response) -> dict[str, str]:
    assert response.headers["content-type"] == "application/problem+json", response.text
    return {e["field"]: e["reason"] for e in response.json().get("errors", [])}


async def upload(client: httpx.AsyncClient, content: dict[str, Any]) -> dict[str, Any]:
    response = await client.post("/v1/catalogs", json=content)
    assert response.status_code in (200, 201), response.text
    body: dict[str, Any] = response.json()
    return body


def variant(catalog: dict[str, Any], name: str, **fields: Any) -> dict[str, Any]:
    changed = copy.deepcopy(catalog)
    changed["name"] = name
    changed.update(fields)
    return changed


async def default_id(client: httpx.AsyncClient) -> str:
    response = await client.get("/v1/catalogs/default")
    assert response.status_code == 200
    return str(response.json()["id"])


async def test_the_demo_catalog_is_the_default_and_says_so(client: httpx.AsyncClient) -> None:
    [demo] = (await client.get("/v1/catalogs")).json()["items"]
    assert (demo["status"], demo["default"], demo["effective_from"], demo["effective_until"]) == \
        ("active", True, "2026-10-01", None)
    assert await default_id(client) == demo["id"]


async def test_uploads_never_change_the_default_and_identical_content_changes_nothing(
    client: httpx.AsyncClient, clock: FakeClock, demo_catalog: dict[str, Any]
) -> None:
    demo_id = await default_id(client)
    clock.advance(minutes=1)
    second = await upload(client, variant(demo_catalog, "second"))
    assert (second["status"], second["default"]) == ("active", False)
    assert await default_id(client) == demo_id
    # The demo catalog again: the stored one, 200, and still the default; nothing else moved.
    again = await client.post("/v1/catalogs", json=demo_catalog)
    assert again.status_code == 200
    assert (again.json()["id"], again.json()["default"]) == (demo_id, True)
    listed = (await client.get("/v1/catalogs")).json()["items"]
    assert [(c["id"], c["default"], c["status"]) for c in listed] == [
        (second["id"], False, "active"), (demo_id, True, "active")]


async def test_an_admin_sets_the_default_explicitly_and_only_to_a_usable_catalog(
    client: httpx.AsyncClient, clock: FakeClock, demo_catalog: dict[str, Any]
) -> None:
    second = await upload(client, variant(demo_catalog, "second"))
    response = await client.put("/v1/catalogs/default", json={"catalog_id": second["id"]})
    assert response.status_code == 200
    assert (response.json()["id"], response.json()["default"]) == (second["id"], True)
    assert await default_id(client) == second["id"]

    future = await upload(client, variant(demo_catalog, "next-year", effective_from="2028-01-01"))
    refused = await client.put("/v1/catalogs/default", json={"catalog_id": future["id"]})
    assert refused.status_code == 422
    assert "takes effect on 2028-01-01" in problem_fields(refused)["catalog_id"]
    unknown = await client.put("/v1/catalogs/default", json={"catalog_id": "cat_nothing"})
    assert problem_fields(unknown) == {"catalog_id": "no catalog 'cat_nothing'"}
    assert await default_id(client) == second["id"]


async def test_a_retired_catalog_is_refused_by_name_and_can_be_reactivated(
    client: httpx.AsyncClient, demo_catalog: dict[str, Any], owned_wins_request: dict[str, Any]
) -> None:
    second = await upload(client, variant(demo_catalog, "second"))
    retired = await client.patch(f"/v1/catalogs/{second['id']}", json={"status": "retired"})
    assert retired.status_code == 200 and retired.json()["status"] == "retired"
    refused = await client.post("/v1/quotes", json={**owned_wins_request, "catalog_id": second["id"]})
    assert refused.status_code == 422
    assert problem_fields(refused) == {"catalog_id": f"catalog {second['id']!r} (second) is retired"}
    assert (await client.put("/v1/catalogs/default", json={"catalog_id": second["id"]})).status_code == 422
    listed = (await client.get("/v1/catalogs", params={"status": "retired"})).json()["items"]
    assert [c["id"] for c in listed] == [second["id"]]
    # Uploading the same content again does not bring it back: only the lifecycle call does.
    assert (await upload(client, variant(demo_catalog, "second")))["status"] == "retired"
    assert (await client.patch(f"/v1/catalogs/{second['id']}", json={"status": "active"})).json()["status"] == \
        "active"
    assert (await client.post("/v1/quotes", json={**owned_wins_request, "catalog_id": second["id"]})).status_code \
        == 201


async def test_the_default_cannot_be_retired(client: httpx.AsyncClient) -> None:
    demo_id = await default_id(client)
    response = await client.patch(f"/v1/catalogs/{demo_id}", json={"status": "retired"})
    assert response.status_code == 409
    assert "set another default" in response.json()["detail"]
    bad = await client.patch(f"/v1/catalogs/{demo_id}", json={"status": "gone"})
    assert bad.status_code == 422 and "status" in problem_fields(bad)


async def test_effective_dates_bound_the_days_a_quote_may_use_a_catalog(
    client: httpx.AsyncClient, clock: FakeClock, demo_catalog: dict[str, Any], owned_wins_request: dict[str, Any]
) -> None:
    # The clock stands at 2027-01-04.
    window = await upload(client, variant(demo_catalog, "january", effective_from="2027-01-02",
                                          effective_until="2027-01-05"))
    assert (window["effective_from"], window["effective_until"]) == ("2027-01-02", "2027-01-05")
    assert (await client.post("/v1/quotes", json={**owned_wins_request, "catalog_id": window["id"]})).status_code \
        == 201
    clock.advance(days=1)  # 2027-01-05: the last day, inclusive
    assert (await client.post("/v1/quotes", json={**owned_wins_request, "catalog_id": window["id"]})).status_code \
        == 201
    clock.advance(days=1)
    expired = await client.post("/v1/quotes", json={**owned_wins_request, "catalog_id": window["id"]})
    assert problem_fields(expired) == {
        "catalog_id": f"catalog {window['id']!r} (january) was effective until 2027-01-05, before 2027-01-06"}
    later = await upload(client, variant(demo_catalog, "march", effective_from="2027-03-01"))
    early = await client.post("/v1/quotes", json={**owned_wins_request, "catalog_id": later["id"]})
    assert early.status_code == 422 and "takes effect on 2027-03-01" in problem_fields(early)["catalog_id"]


async def test_sweeps_and_fleet_plans_obey_the_same_rules(
    client: httpx.AsyncClient, demo_catalog: dict[str, Any], owned_wins_request: dict[str, Any]
) -> None:
    later = await upload(client, variant(demo_catalog, "march", effective_from="2027-03-01"))
    sweep = {"base": {**owned_wins_request, "catalog_id": later["id"]},
             "grid": {"overrides.electricity_price_per_kwh": [0.1, 0.2]}}
    response = await client.post("/v1/sweeps", json=sweep)
    assert response.status_code == 422 and "takes effect" in problem_fields(response)["base.catalog_id"]
    plan = json.loads((EXAMPLES / "fleet-plan.json").read_text(encoding="utf-8"))
    response = await client.post("/v1/fleet-plans", json={**plan, "catalog_id": later["id"]})
    assert response.status_code == 422 and "takes effect" in problem_fields(response)["catalog_id"]


async def test_an_end_before_the_start_is_refused(client: httpx.AsyncClient, demo_catalog: dict[str, Any]) -> None:
    response = await client.post("/v1/catalogs", json=variant(demo_catalog, "x", effective_from="2027-02-01",
                                                              effective_until="2027-01-01"))
    assert problem_fields(response) == {"effective_until": "2027-01-01 is before effective_from 2027-02-01"}


async def test_only_an_admin_moves_the_default_or_retires(app: FastAPI, client: httpx.AsyncClient) -> None:
    demo_id = await default_id(client)
    _, key = issue_key(app.state.storage, role="analyst", team="finance", now=app.state.clock())
    headers = {"Authorization": f"Bearer {key}"}
    app.state.local_mode._checked = float("-inf")  # notice the new key now, not in five seconds
    put = await client.put("/v1/catalogs/default", json={"catalog_id": demo_id}, headers=headers)
    patch = await client.patch(f"/v1/catalogs/{demo_id}", json={"status": "active"}, headers=headers)
    assert (put.status_code, patch.status_code) == (403, 403)
