"""HTTP manners: a body in a media type the route does not read is a 415 problem; an unknown field
close to a known one is named with a "did you mean"; an unknown query parameter is a 422 naming it."""

import json
from typing import Any

import httpx
import pytest

from service.contract.request import QuoteRequestIn
from service.errors import InvalidInput
from service.usecases.loading import validate

pytestmark = pytest.mark.anyio


def errors(response: httpx.Response) -> dict[str, str]:
    assert response.headers["content-type"] == "application/problem+json", response.text
    return {e["field"]: e["reason"] for e in response.json().get("errors", [])}


@pytest.mark.parametrize("content_type", ["text/plain", "application/yaml", "application/x-www-form-urlencoded",
                                          "multipart/form-data; boundary=x"])
async def test_a_quote_body_that_is_not_json_is_a_415(client: httpx.AsyncClient, content_type: str,
                                                      owned_wins_request: dict[str, Any]) -> None:
    response = await client.post("/v1/quotes", content=json.dumps(owned_wins_request),
                                 headers={"content-type": content_type})
    assert response.status_code == 415
    assert response.headers["content-type"] == "application/problem+json"
    problem = response.json()
    assert problem["type"] == "/problems/unsupported-media-type"
    assert "send Content-Type: application/json" in problem["detail"]
    assert (await client.get("/v1/quotes")).json()["items"] == []  # nothing was stored


async def test_json_with_a_charset_or_a_json_suffix_is_read_and_a_body_without_a_type_is_not(
    client: httpx.AsyncClient, owned_wins_request: dict[str, Any]
) -> None:
    body = json.dumps(owned_wins_request).encode()
    for content_type in ("application/json; charset=utf-8", "application/problem+json"):
        response = await client.post("/v1/quotes", content=body, headers={"content-type": content_type})
        assert response.status_code == 201, (content_type, response.text)
    untyped = await client.post("/v1/quotes", content=body)
    assert untyped.status_code == 415 and "a body without a type" in untyped.json()["detail"]
    empty = await client.post("/v1/quotes")
    assert empty.status_code == 422 and errors(empty) == {"(body)": "Field required"}


@pytest.mark.parametrize(("path", "method"), [("/v1/sweeps", "POST"), ("/v1/fleet-plans", "POST"),
                                              ("/v1/catalogs/default", "PUT")])
async def test_every_json_route_refuses_other_media_types(client: httpx.AsyncClient, path: str, method: str) -> None:
    response = await client.request(method, path, content=b"a: 1", headers={"content-type": "text/plain"})
    assert response.status_code == 415


async def test_a_catalog_may_be_yaml_but_not_plain_text(client: httpx.AsyncClient,
                                                        demo_catalog: dict[str, Any]) -> None:
    import yaml

    text = yaml.safe_dump({**demo_catalog, "name": "as-yaml"})
    assert (await client.post("/v1/catalogs", content=text, headers={"content-type": "application/yaml"})
            ).status_code == 201
    assert (await client.post("/v1/catalogs", content=text, headers={"content-type": "text/plain"})
            ).status_code == 415


async def test_a_mistyped_field_gets_the_name_it_probably_meant(client: httpx.AsyncClient,
                                                                owned_wins_request: dict[str, Any]) -> None:
    request = json.loads(json.dumps(owned_wins_request))
    request["campaign"]["deadlin_days"] = request["campaign"].pop("deadline_days")
    request["campaign"]["work"]["tokns"] = 1e12
    request["campaign"]["data"]["zzz"] = 1
    response = await client.post("/v1/quotes", json=request)
    assert response.status_code == 422
    found = errors(response)
    assert found["campaign.deadlin_days"] == "unknown field; did you mean 'deadline_days'?"
    assert found["campaign.work.tokns"] == "unknown field; did you mean 'tokens'?"
    assert found["campaign.data.zzz"] == "unknown field"  # nothing close: no guess


async def test_a_mistyped_catalog_field_gets_a_suggestion_too(client: httpx.AsyncClient,
                                                              demo_catalog: dict[str, Any]) -> None:
    catalog = json.loads(json.dumps(demo_catalog))
    catalog["sites"][0]["electricity_price_per_kw"] = catalog["sites"][0].pop("electricity_price_per_kwh")
    response = await client.post("/v1/catalogs", json=catalog)
    assert errors(response)["sites.0.electricity_price_per_kw"] == \
        "unknown field; did you mean 'electricity_price_per_kwh'?"


def test_files_read_by_the_command_line_get_the_same_suggestions(owned_wins_request: dict[str, Any]) -> None:
    request = json.loads(json.dumps(owned_wins_request))
    request["campain"] = request.pop("campaign")
    with pytest.raises(InvalidInput) as raised:
        validate(QuoteRequestIn, request, source="campaign.json")
    assert {p.field: p.reason for p in raised.value.problems}["campain"] == \
        "unknown field; did you mean 'campaign'?"


async def test_an_unknown_query_parameter_is_a_422_with_the_nearest_known_one(client: httpx.AsyncClient) -> None:
    response = await client.get("/v1/quotes", params={"limt": 5, "team": "language"})
    assert response.status_code == 422
    assert errors(response) == {"query.limt": "unknown query parameter; did you mean 'limit'?"}
    far = await client.get("/v1/catalogs", params={"colour": "blue"})
    assert errors(far) == {"query.colour": "unknown query parameter; this route takes cursor, limit, status"}
    catalog_id = (await client.get("/v1/catalogs")).json()["items"][0]["id"]
    none = await client.get(f"/v1/catalogs/{catalog_id}", params={"x": "1"})
    assert errors(none) == {"query.x": "this route takes no query parameters"}
    assert (await client.get("/v1/quotes", params={"limit": 5})).status_code == 200


async def test_probes_and_the_docs_are_not_bothered_by_query_strings(client: httpx.AsyncClient) -> None:
    assert (await client.get("/healthz", params={"cache": "no"})).status_code == 200
    assert (await client.get("/docs", params={"x": "1"})).status_code == 200
