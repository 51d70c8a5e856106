"""Quotes over HTTP (api.md, conventions.md): created and stored, read back unchanged, listed with
filters newest first, recomputed, idempotent with a key; every refusal is a problem that changes
nothing, and the OpenAPI document carries the demo examples."""

import copy
import json
import re
import shutil
from datetime import timedelta
from pathlib import Path
from typing import Any

import httpx
import pytest
from sqlalchemy import text

from service.api.app import create_app
from service.config import Settings
from service.contract.answers import QuoteOut
from service.contract.request import QuoteRequestIn
from service.storage.repository import Storage
from service.usecases import quotes as quote_use_cases
from service.usecases.idempotency import IDEMPOTENCY_KEEP, IDEMPOTENCY_LEASE, body_fingerprint
from tests.api.conftest import FakeClock
from tests.api.problems import problem_of
from tests.conftest import EXAMPLES, load_example

TOP_LEVEL = {"id", "created_at", "catalog_id", "catalog_hash", "model_version", "request", "work", "options",
             "recommendation", "breakeven", "curves", "assumptions", "cautions"}




def fields_of(problem: dict[str, Any]) -> set[str]:
    return {error["field"] for error in problem["errors"]}


def count(storage: Storage) -> int:
    with storage.reading() as repository:
        return repository.count_quotes()


def campaign(base: dict[str, Any], *, name: str | None = None, team: str | None = None) -> dict[str, Any]:
    request = copy.deepcopy(base)
    request["campaign"]["name"] = name or request["campaign"]["name"]
    request["campaign"]["team"] = team or request["campaign"]["team"]
    return request


async def create(client: httpx.AsyncClient, request: dict[str, Any], **headers: str) -> dict[str, Any]:
    response = await client.post("/v1/quotes", json=request, headers=headers)
    assert response.status_code == 201, response.text
    body: dict[str, Any] = response.json()
    return body


async def listed(client: httpx.AsyncClient, **params: Any) -> list[str]:
    response = await client.get("/v1/quotes", params=params)
    assert response.status_code == 200, response.text
    return [item["id"] for item in response.json()["items"]]


@pytest.mark.anyio
async def test_a_quote_is_created_with_every_documented_field_and_a_location(
    client: httpx.AsyncClient, owned_wins_request: dict[str, Any]
) -> None:
    response = await client.post("/v1/quotes", json=owned_wins_request)
    assert response.status_code == 201, response.text
    body = response.json()
    assert set(body) >= TOP_LEVEL
    QuoteOut.model_validate(body)
    assert response.headers["location"] == f"/v1/quotes/{body['id']}"
    assert body["created_at"] == "2027-01-04T09:00:00Z"
    assert body["request"]["campaign"]["name"] == owned_wins_request["campaign"]["name"]
    assert body["options"] and body["assumptions"]


@pytest.mark.anyio
@pytest.mark.parametrize("example", ["campaign-owned-wins.json", "campaign-renting-wins.json",
                                     "campaign-residency-blocked.json", "campaign-recurring.json",
                                     "campaign-split.json"])
async def test_every_demo_campaign_quotes_to_the_documented_schema(client: httpx.AsyncClient, example: str) -> None:
    """The OpenAPI's quote schema describes every answer, a split of an owned and a rented part included."""
    body = await create(client, load_example(example))
    QuoteOut.model_validate(body)
    if example == "campaign-split.json":
        split = next(o for o in body["options"] if o["venue"]["kind"] == "split")
        assert len(split["parts"]) == 2 and "+" in split["venue"]["jurisdiction"]
        assert {part["currency"] for part in split["parts"]} == {body["currency"]}


@pytest.mark.anyio
async def test_a_stored_quote_reads_back_identical(
    client: httpx.AsyncClient, owned_wins_request: dict[str, Any]
) -> None:
    created = await create(client, owned_wins_request)
    response = await client.get(f"/v1/quotes/{created['id']}")
    assert response.status_code == 200
    assert response.json() == created


@pytest.mark.anyio
async def test_the_default_catalog_is_used_until_an_admin_changes_it_and_an_explicit_one_always(
    client: httpx.AsyncClient, clock: FakeClock, demo_catalog: dict[str, Any], owned_wins_request: dict[str, Any]
) -> None:
    demo = (await client.get("/v1/catalogs")).json()["items"][0]
    clock.advance(minutes=1)
    newer_content = copy.deepcopy(demo_catalog)
    newer_content["name"] = "newer"
    newer = (await client.post("/v1/catalogs", json=newer_content)).json()
    by_default = await create(client, owned_wins_request)
    assert (by_default["catalog_id"], by_default["catalog_hash"]) == (demo["id"], demo["content_hash"])
    explicit = await create(client, {**owned_wins_request, "catalog_id": newer["id"]})
    assert (explicit["catalog_id"], explicit["catalog_hash"]) == (newer["id"], newer["content_hash"])
    assert (await client.put("/v1/catalogs/default", json={"catalog_id": newer["id"]})).status_code == 200
    assert (await create(client, owned_wins_request))["catalog_id"] == newer["id"]


@pytest.mark.anyio
async def test_an_unknown_catalog_id_is_a_problem_naming_it(
    client: httpx.AsyncClient, storage: Storage, owned_wins_request: dict[str, Any]
) -> None:
    response = await client.post("/v1/quotes", json={**owned_wins_request, "catalog_id": "cat_nope"})
    assert "catalog_id" in fields_of(problem_of(response, 422))
    assert count(storage) == 0


@pytest.mark.anyio
@pytest.mark.parametrize(("path", "value", "field"), [
    (("campaign", "work", "tokens"), -1, "campaign.work.tokens"),
    (("campaign", "deadline_days"), 0, "campaign.deadline_days"),
    (("campaign", "work", "paramters"), 7e9, "campaign.work.paramters"),
])
async def test_an_invalid_request_names_the_field_and_stores_nothing(
    client: httpx.AsyncClient, storage: Storage, owned_wins_request: dict[str, Any], path: tuple[str, ...],
    value: Any, field: str,
) -> None:
    target = owned_wins_request
    for key in path[:-1]:
        target = target[key]
    target[path[-1]] = value
    assert field in fields_of(problem_of(await client.post("/v1/quotes", json=owned_wins_request), 422))
    assert count(storage) == 0


@pytest.mark.anyio
@pytest.mark.parametrize("content", [b"", b"{", b"[]"])
async def test_a_body_that_is_not_a_request_object_is_a_problem(client: httpx.AsyncClient, content: bytes) -> None:
    problem_of(await client.post("/v1/quotes", content=content, headers={"content-type": "application/json"}), 422)


@pytest.mark.anyio
async def test_an_unknown_jurisdiction_code_is_named_by_its_position(
    client: httpx.AsyncClient, storage: Storage, owned_wins_request: dict[str, Any]
) -> None:
    owned_wins_request["campaign"]["data"]["allowed_jurisdictions"] = ["DE", "QQ"]
    problem = problem_of(await client.post("/v1/quotes", json=owned_wins_request), 422)
    assert fields_of(problem) == {"campaign.data.allowed_jurisdictions.1"}
    assert count(storage) == 0


@pytest.mark.anyio
async def test_quotes_are_filtered_by_team_campaign_and_creation_time_newest_first(
    client: httpx.AsyncClient, clock: FakeClock, owned_wins_request: dict[str, Any]
) -> None:
    start = clock.now
    a = await create(client, campaign(owned_wins_request, name="alpha", team="perception"))
    clock.advance(hours=1)
    b = await create(client, campaign(owned_wins_request, name="beta", team="perception"))
    clock.advance(hours=1)
    c = await create(client, campaign(owned_wins_request, name="alpha", team="language"))
    assert await listed(client) == [c["id"], b["id"], a["id"]]
    assert await listed(client, team="perception") == [b["id"], a["id"]]
    assert await listed(client, campaign_name="alpha") == [c["id"], a["id"]]
    assert await listed(client, team="language", campaign_name="beta") == []
    one_hour = (start + timedelta(hours=1)).isoformat()
    two_hours = (start + timedelta(hours=2)).isoformat()
    assert await listed(client, created_from=one_hour) == [c["id"], b["id"]]  # inclusive
    assert await listed(client, created_to=two_hours) == [b["id"], a["id"]]  # exclusive
    assert await listed(client, created_from=one_hour, created_to=two_hours) == [b["id"]]


@pytest.mark.anyio
async def test_a_quote_is_stamped_when_it_is_stored_not_when_its_request_arrived(
    client: httpx.AsyncClient, clock: FakeClock, owned_wins_request: dict[str, Any], monkeypatch: pytest.MonkeyPatch
) -> None:
    """Stamped at the write, quotes are created in the order they are stored: a client asking for those
    created after the newest it has seen does not miss one that arrived earlier but computed longer."""
    compute = quote_use_cases.quote

    def slow_quote(*args: Any, **kwargs: Any) -> dict[str, Any]:
        clock.advance(seconds=30)  # the model runs for half a minute after the request arrived
        return compute(*args, **kwargs)

    monkeypatch.setattr(quote_use_cases, "quote", slow_quote)
    arrived = clock.now
    slow = await create(client, owned_wins_request)
    stored_at = arrived + timedelta(seconds=30)
    assert slow["created_at"] == stored_at.isoformat().replace("+00:00", "Z")
    assert (await client.get(f"/v1/quotes/{slow['id']}")).json()["created_at"] == slow["created_at"]
    assert await listed(client, created_from=(arrived + timedelta(seconds=1)).isoformat()) == [slow["id"]]


@pytest.mark.anyio
async def test_a_creation_time_in_another_zone_means_the_same_instant(
    client: httpx.AsyncClient, clock: FakeClock, owned_wins_request: dict[str, Any]
) -> None:
    early = await create(client, owned_wins_request)
    clock.advance(hours=3)
    late = await create(client, owned_wins_request)
    # Quotes at 09:00 and 12:00 UTC; 10:30 UTC written as 12:30 at +02:00 and as 05:30 at -05:00.
    for moment in ("2027-01-04T12:30:00+02:00", "2027-01-04T05:30:00-05:00"):
        assert await listed(client, created_from=moment) == [late["id"]]
        assert await listed(client, created_to=moment) == [early["id"]]


@pytest.mark.anyio
@pytest.mark.parametrize("name", ["created_from", "created_to"])
async def test_a_creation_time_without_a_zone_is_a_problem(client: httpx.AsyncClient, name: str) -> None:
    problem = problem_of(await client.get("/v1/quotes", params={name: "2027-01-04T09:00:00"}), 422)
    assert fields_of(problem) == {name}


@pytest.mark.anyio
async def test_paging_with_the_cursor_visits_every_quote_once_newest_first(
    client: httpx.AsyncClient, clock: FakeClock, owned_wins_request: dict[str, Any]
) -> None:
    created = []
    for k in range(7):
        if k % 3 == 0:  # some quotes share a timestamp, so ties are broken by id
            clock.advance(seconds=1)
        created.append(await create(client, owned_wins_request))
    seen: list[dict[str, Any]] = []
    cursor = None
    for _ in range(10):
        page = (await client.get("/v1/quotes", params={"limit": 2, **({"cursor": cursor} if cursor else {})})).json()
        assert len(page["items"]) <= 2
        seen += page["items"]
        cursor = page["next_cursor"]
        if cursor is None:
            break
    assert sorted(item["id"] for item in seen) == sorted(q["id"] for q in created)
    keys = [(item["created_at"], item["id"]) for item in seen]
    assert keys == sorted(keys, reverse=True)


@pytest.mark.anyio
@pytest.mark.parametrize("params", [{"cursor": "garbage!"}, {"cursor": "Zm9vYmFy"}, {"limit": 201}, {"limit": 0}])
async def test_a_garbage_cursor_or_an_out_of_range_limit_is_a_problem(
    client: httpx.AsyncClient, params: dict[str, Any]
) -> None:
    problem_of(await client.get("/v1/quotes", params=params), 422)


@pytest.mark.anyio
async def test_an_unknown_quote_is_a_404_problem(client: httpx.AsyncClient) -> None:
    assert "q_missing" in problem_of(await client.get("/v1/quotes/q_missing"), 404)["detail"]
    problem_of(await client.post("/v1/quotes/q_missing/recompute"), 404)


@pytest.mark.anyio
async def test_recomputing_an_untouched_quote_finds_no_difference(
    client: httpx.AsyncClient, owned_wins_request: dict[str, Any]
) -> None:
    created = await create(client, owned_wins_request)
    response = await client.post(f"/v1/quotes/{created['id']}/recompute")
    assert response.status_code == 200
    body = response.json()
    assert (body["quote_id"], body["changed"], body["differences"], body["differences_total"]) == (
        created["id"], False, [], 0)
    assert body["model_version_stored"] == body["model_version_now"] == created["model_version"]


@pytest.mark.anyio
async def test_recomputing_a_tampered_quote_names_the_differing_paths(
    client: httpx.AsyncClient, storage: Storage, owned_wins_request: dict[str, Any]
) -> None:
    created = await create(client, owned_wins_request)
    tampered = copy.deepcopy(created)
    honest_total = tampered["options"][0]["cost"]["total"]
    tampered["options"][0]["cost"]["total"] = honest_total * 2
    tampered["cautions"] = [*tampered["cautions"], "inserted by hand"]
    with storage.writing() as repository:
        repository.session.execute(text("UPDATE quote SET response = :response WHERE id = :id"),
                                   {"response": json.dumps(tampered), "id": created["id"]})
    body = (await client.post(f"/v1/quotes/{created['id']}/recompute")).json()
    assert body["changed"] is True
    paths = {d["path"]: d for d in body["differences"]}
    assert set(paths) == {"options[0].cost.total", "cautions"}
    assert paths["options[0].cost.total"]["stored"] == honest_total * 2
    assert paths["options[0].cost.total"]["recomputed"] == pytest.approx(honest_total, rel=1e-9)


@pytest.mark.anyio
async def test_the_same_key_and_body_replays_the_first_answer(
    client: httpx.AsyncClient, storage: Storage, clock: FakeClock, owned_wins_request: dict[str, Any]
) -> None:
    first = await create(client, owned_wins_request, **{"Idempotency-Key": "k-1"})
    clock.advance(minutes=10)
    reordered = json.dumps({key: owned_wins_request[key] for key in reversed(list(owned_wins_request))})
    again = await client.post("/v1/quotes", content=reordered,
                              headers={"Idempotency-Key": "k-1", "content-type": "application/json"})
    assert again.status_code == 201
    assert again.headers["berth-replayed"] == "true"
    assert again.headers["location"] == f"/v1/quotes/{first['id']}"
    assert again.json() == first
    assert count(storage) == 1


@pytest.mark.anyio
async def test_the_same_key_with_another_body_is_refused_and_the_first_answer_survives(
    client: httpx.AsyncClient, storage: Storage, owned_wins_request: dict[str, Any]
) -> None:
    first = await create(client, owned_wins_request, **{"Idempotency-Key": "k-2"})
    other = campaign(owned_wins_request, name="something-else")
    problem_of(await client.post("/v1/quotes", json=other, headers={"Idempotency-Key": "k-2"}), 422)
    assert count(storage) == 1
    replay = await client.post("/v1/quotes", json=owned_wins_request, headers={"Idempotency-Key": "k-2"})
    assert replay.json()["id"] == first["id"]


@pytest.mark.anyio
async def test_a_key_still_in_flight_is_a_conflict_until_its_lease_runs_out(
    client: httpx.AsyncClient, storage: Storage, clock: FakeClock, owned_wins_request: dict[str, Any]
) -> None:
    raw = json.dumps(owned_wins_request).encode()
    with storage.writing() as repository:
        claim = repository.claim_key(caller="local", key="k-3", body_hash=body_fingerprint(raw), now=clock.now,
                                     lease=IDEMPOTENCY_LEASE, keep=IDEMPOTENCY_KEEP)
    assert claim.state == "claimed"
    headers = {"Idempotency-Key": "k-3", "content-type": "application/json"}
    clock.advance(seconds=59)
    problem_of(await client.post("/v1/quotes", content=raw, headers=headers), 409)
    assert count(storage) == 0
    clock.advance(seconds=2)  # 61 s after the claim: the first request is presumed dead
    response = await client.post("/v1/quotes", content=raw, headers=headers)
    assert response.status_code == 201
    assert "berth-replayed" not in response.headers
    assert count(storage) == 1


@pytest.mark.anyio
async def test_a_rejected_request_releases_its_key_for_a_corrected_retry(
    client: httpx.AsyncClient, storage: Storage, owned_wins_request: dict[str, Any]
) -> None:
    wrong = copy.deepcopy(owned_wins_request)
    wrong["campaign"]["data"]["allowed_jurisdictions"] = ["QQ"]
    problem_of(await client.post("/v1/quotes", json=wrong, headers={"Idempotency-Key": "k-4"}), 422)
    problem_of(await client.post("/v1/quotes", json={**owned_wins_request, "catalog_id": "cat_nope"},
                                 headers={"Idempotency-Key": "k-4"}), 422)
    created = await create(client, owned_wins_request, **{"Idempotency-Key": "k-4"})
    assert count(storage) == 1
    replay = await client.post("/v1/quotes", json=owned_wins_request, headers={"Idempotency-Key": "k-4"})
    assert replay.json()["id"] == created["id"]


@pytest.mark.anyio
async def test_the_openapi_document_has_the_demo_examples_and_the_problem_and_catalog_schemas(
    client: httpx.AsyncClient,
) -> None:
    schema = (await client.get("/openapi.json")).json()
    body = schema["paths"]["/v1/quotes"]["post"]["requestBody"]["content"]["application/json"]
    assert set(body["examples"]) == {"owned_wins", "renting_wins", "residency_blocked", "recurring", "split"}
    for example in body["examples"].values():
        QuoteRequestIn.model_validate(example["value"])
    components = schema["components"]["schemas"]
    assert {"type", "title", "status", "detail"} <= set(components["Problem"]["properties"])
    assert "sites" in components["CatalogIn"]["properties"]
    docs = await client.get("/docs")
    assert docs.status_code == 200
    assert "text/html" in docs.headers["content-type"]


@pytest.mark.anyio
async def test_the_docs_page_loads_its_assets_from_berth_itself(client: httpx.AsyncClient) -> None:
    page = (await client.get("/docs")).text
    assert "://" not in page  # no absolute URL: nothing from a public network
    assets = re.findall(r'(?:src|href)="([^"]+)"', page)
    assert {"/docs/assets/swagger-ui-bundle.js", "/docs/assets/swagger-ui.css"} <= set(assets)
    for asset in assets:
        response = await client.get(asset)
        assert response.status_code == 200 and len(response.content) > 0, asset
    assert "SwaggerUIBundle" in (await client.get("/docs/assets/swagger-ui-bundle.js")).text
    assert (await client.get("/redoc")).status_code == 404  # its scripts would come from a public network


def test_the_openapi_examples_are_the_campaigns_beside_the_demo_catalog(tmp_path: Path) -> None:
    """An installed service finds them where BERTH_DEMO_CATALOG points, not in a source checkout."""
    shutil.copy(EXAMPLES / "catalog.json", tmp_path / "catalog.json")
    shutil.copy(EXAMPLES / "campaign-split.json", tmp_path / "campaign-split.json")
    app = create_app(Settings(database_url="sqlite://", demo_catalog=tmp_path / "catalog.json"))
    body = app.openapi()["paths"]["/v1/quotes"]["post"]["requestBody"]["content"]["application/json"]
    assert body["examples"] == {"split": {"summary": "Split between an owned site and a rented offer",
                                          "value": load_example("campaign-split.json")}}


@pytest.mark.anyio
async def test_an_unknown_route_and_a_wrong_method_are_problems_too(client: httpx.AsyncClient) -> None:
    problem_of(await client.get("/v1/nothing-here"), 404)
    wrong = await client.put("/v1/quotes/q_any/recompute")
    problem_of(wrong, 405)
    assert wrong.headers["allow"] == "POST"
    assert (await client.put("/v1/quotes")).headers["allow"] == "GET, HEAD, POST"


@pytest.mark.anyio
async def test_head_answers_as_get_without_the_body(
    client: httpx.AsyncClient, owned_wins_request: dict[str, Any]
) -> None:
    """Every readable resource answers HEAD, as the Allow header of a 405 promises (RFC 9110 §9.3.2)."""
    quote_id = (await create(client, owned_wins_request))["id"]
    plain = {"accept-encoding": "identity"}  # httpx asks for gzip by default, and decodes it
    for path in ("/healthz", f"/v1/quotes/{quote_id}", f"/v1/quotes/{quote_id}/options.csv", "/v1/quotes/q_none"):
        got, head = await client.get(path, headers=plain), await client.head(path, headers=plain)
        assert head.status_code == got.status_code and head.content == b""
        assert head.headers["content-type"] == got.headers["content-type"]
        if "content-length" in got.headers:
            assert head.headers["content-length"] == got.headers["content-length"] == str(len(got.content))
        zipped, zipped_head = await client.get(path), await client.head(path)
        for name in ("content-encoding", "content-length"):
            assert zipped_head.headers.get(name) == zipped.headers.get(name)
    refused = await client.head("/v1/quotes/q_any/recompute")  # POST only
    assert refused.status_code == 405 and refused.headers["allow"] == "POST" and refused.content == b""
