"""Catalogs over HTTP (api.md): uploaded, validated, stored immutably under a content hash,
listed newest first, read back; every refusal is a problem and changes nothing."""

import copy
import hashlib
import json
import re
from typing import Any

import httpx
import pytest
import yaml

from tests.api.conftest import FakeClock
from tests.api.problems import problem_of


def another_catalog(demo_catalog: dict[str, Any], name: str = "second-catalog") -> dict[str, Any]:
    catalog = copy.deepcopy(demo_catalog)
    catalog["name"] = name
    return catalog


async def stored_ids(client: httpx.AsyncClient) -> list[str]:
    response = await client.get("/v1/catalogs", params={"limit": 200})
    assert response.status_code == 200
    return [item["id"] for item in response.json()["items"]]


@pytest.mark.anyio
async def test_a_new_catalog_is_stored_with_an_id_a_sha256_content_hash_and_a_location(
    client: httpx.AsyncClient, demo_catalog: dict[str, Any]
) -> None:
    response = await client.post("/v1/catalogs", json=another_catalog(demo_catalog))
    assert response.status_code == 201, response.text
    body = response.json()
    assert body["name"] == "second-catalog"
    assert body["currency"] == demo_catalog["currency"]
    assert re.fullmatch(r"[0-9a-f]{64}", body["content_hash"])
    canonical = json.dumps(body["content"], sort_keys=True, separators=(",", ":")).encode()
    assert body["content_hash"] == hashlib.sha256(canonical).hexdigest()
    assert response.headers["location"] == f"/v1/catalogs/{body['id']}"
    assert body["id"] in await stored_ids(client)


@pytest.mark.anyio
async def test_the_same_content_again_returns_the_stored_catalog_with_200(
    client: httpx.AsyncClient, demo_catalog: dict[str, Any]
) -> None:
    catalog = another_catalog(demo_catalog)
    first = (await client.post("/v1/catalogs", json=catalog)).json()
    again = await client.post("/v1/catalogs", json=catalog)
    assert again.status_code == 200
    assert again.json()["id"] == first["id"]
    assert again.json()["content_hash"] == first["content_hash"]
    assert again.headers["location"] == f"/v1/catalogs/{first['id']}"


@pytest.mark.anyio
async def test_reordered_keys_are_the_same_content(client: httpx.AsyncClient, demo_catalog: dict[str, Any]) -> None:
    catalog = another_catalog(demo_catalog)
    first = (await client.post("/v1/catalogs", json=catalog)).json()
    reordered = {key: catalog[key] for key in reversed(list(catalog))}
    reordered["sites"] = [{k: site[k] for k in reversed(list(site))} for site in catalog["sites"]]
    text = json.dumps(reordered, indent=3)
    assert text != json.dumps(catalog, indent=3)
    response = await client.post("/v1/catalogs", content=text, headers={"content-type": "application/json"})
    assert response.status_code == 200
    assert response.json()["id"] == first["id"]


@pytest.mark.anyio
async def test_the_same_content_as_yaml_is_the_same_catalog(
    client: httpx.AsyncClient, demo_catalog: dict[str, Any]
) -> None:
    catalog = another_catalog(demo_catalog)
    first = (await client.post("/v1/catalogs", json=catalog)).json()
    response = await client.post("/v1/catalogs", content=yaml.safe_dump(catalog, sort_keys=True),
                                 headers={"content-type": "application/yaml"})
    assert response.status_code == 200, response.text
    assert response.json()["id"] == first["id"]


@pytest.mark.anyio
async def test_a_new_catalog_sent_as_yaml_is_stored(client: httpx.AsyncClient, demo_catalog: dict[str, Any]) -> None:
    text = yaml.safe_dump(another_catalog(demo_catalog, "yaml-catalog"))
    response = await client.post("/v1/catalogs", content=text, headers={"content-type": "application/yaml"})
    assert response.status_code == 201, response.text
    assert response.json()["name"] == "yaml-catalog"


@pytest.mark.anyio
async def test_the_demo_catalog_loaded_at_start_is_found_again_by_its_content(
    client: httpx.AsyncClient, demo_catalog: dict[str, Any]
) -> None:
    [demo_id] = await stored_ids(client)
    response = await client.post("/v1/catalogs", json=demo_catalog)
    assert response.status_code == 200
    assert response.json()["id"] == demo_id


@pytest.mark.anyio
async def test_an_invalid_catalog_is_a_problem_naming_each_field_and_stores_nothing(
    client: httpx.AsyncClient, demo_catalog: dict[str, Any]
) -> None:
    before = await stored_ids(client)
    catalog = another_catalog(demo_catalog)
    catalog["sites"][0]["pue"] = 0.5
    catalog["node_types"][1]["accelerators_per_node"] = 0
    body = problem_of(await client.post("/v1/catalogs", json=catalog), 422)
    fields = {error["field"] for error in body["errors"]}
    assert {"sites.0.pue", "node_types.1.accelerators_per_node"} <= fields
    assert all(error["reason"] for error in body["errors"])
    assert await stored_ids(client) == before


@pytest.mark.anyio
@pytest.mark.parametrize("content", [b"", b"  \n", b"[1, 2]", b'"a catalog"', b"null", b"42", b"{not json: ["])
async def test_an_empty_or_non_object_body_is_a_problem_and_stores_nothing(
    client: httpx.AsyncClient, content: bytes
) -> None:
    before = await stored_ids(client)
    response = await client.post("/v1/catalogs", content=content, headers={"content-type": "application/json"})
    problem_of(response, 422)
    assert await stored_ids(client) == before


@pytest.mark.anyio
async def test_catalogs_are_listed_newest_first_a_page_at_a_time(
    client: httpx.AsyncClient, clock: FakeClock, demo_catalog: dict[str, Any]
) -> None:
    [demo_id] = await stored_ids(client)
    uploaded = []
    for k in range(3):
        clock.advance(minutes=5)
        response = await client.post("/v1/catalogs", json=another_catalog(demo_catalog, f"catalog-{k}"))
        uploaded.append(response.json()["id"])
    first = (await client.get("/v1/catalogs", params={"limit": 2})).json()
    assert [item["id"] for item in first["items"]] == [uploaded[2], uploaded[1]]
    assert all(item.get("content") is None for item in first["items"])  # the list leaves content out
    assert first["next_cursor"]
    second = (await client.get("/v1/catalogs", params={"limit": 2, "cursor": first["next_cursor"]})).json()
    assert [item["id"] for item in second["items"]] == [uploaded[0], demo_id]
    assert second["next_cursor"] is None
    created = [item["created_at"] for item in first["items"] + second["items"]]
    assert created == sorted(created, reverse=True)


@pytest.mark.anyio
@pytest.mark.parametrize("params", [{"cursor": "not-a-cursor!"}, {"limit": 0}, {"limit": 201}])
async def test_a_bad_cursor_or_limit_on_the_catalog_list_is_a_problem(
    client: httpx.AsyncClient, params: dict[str, Any]
) -> None:
    problem_of(await client.get("/v1/catalogs", params=params), 422)


@pytest.mark.anyio
async def test_one_catalog_is_read_back_with_its_content(
    client: httpx.AsyncClient, demo_catalog: dict[str, Any]
) -> None:
    created = (await client.post("/v1/catalogs", json=another_catalog(demo_catalog))).json()
    response = await client.get(f"/v1/catalogs/{created['id']}")
    assert response.status_code == 200
    assert response.json() == created
    assert response.json()["content"]["sites"][0]["id"] == demo_catalog["sites"][0]["id"]


@pytest.mark.anyio
async def test_an_unknown_catalog_is_a_404_problem(client: httpx.AsyncClient) -> None:
    body = problem_of(await client.get("/v1/catalogs/cat_doesnotexist"), 404)
    assert "cat_doesnotexist" in body["detail"]
