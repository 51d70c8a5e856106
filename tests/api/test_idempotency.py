"""Every POST that creates takes an Idempotency-Key (api.md, conventions.md): the same key with the
same body replays the first answer and creates nothing more; the same key with another body is a
422 naming the header, and the first answer survives; a body that fails validation keeps no key."""

import copy
from collections.abc import Callable
from typing import Any

import httpx
import pytest
from sqlalchemy import text

from service.storage.repository import Storage
from tests.api.problems import problem_of
from tests.conftest import load_example

pytestmark = pytest.mark.anyio


def catalog() -> dict[str, Any]:
    content: dict[str, Any] = load_example("catalog.json")
    content["name"] = "fenmark-labs-2027-q2"  # new content: the demo catalog is already stored
    return content


def sweep() -> dict[str, Any]:
    return {"base": load_example("campaign-owned-wins.json"),
            "grid": {"overrides.electricity_price_per_kwh": [0.08, 0.20]}}


def fleet_plan() -> dict[str, Any]:
    return {**load_example("fleet-plan.json"), "samples": 50}


def quote() -> dict[str, Any]:
    request: dict[str, Any] = load_example("campaign-owned-wins.json")
    return request


def renamed(body: dict[str, Any]) -> dict[str, Any]:
    """The same request for a campaign of another name."""
    changed = copy.deepcopy(body)
    changed.get("base", changed)["campaign"]["name"] += "-again"
    return changed


# (path, table, a body, another body)
CREATING: list[tuple[str, str, Callable[[], dict[str, Any]], Callable[[], dict[str, Any]]]] = [
    ("/v1/catalogs", "catalog", catalog, lambda: {**catalog(), "name": "fenmark-labs-2027-q3"}),
    ("/v1/quotes", "quote", quote, lambda: renamed(quote())),
    ("/v1/sweeps", "sweep", sweep, lambda: renamed(sweep())),
    ("/v1/fleet-plans", "fleet_plan", fleet_plan, lambda: {**fleet_plan(), "samples": 60}),
]
IDS = [table for _, table, _, _ in CREATING]


def rows(storage: Storage, table: str) -> int:
    with storage.engine.connect() as connection:
        return int(connection.execute(text(f"SELECT count(*) FROM {table}")).scalar_one())


@pytest.mark.parametrize(("path", "table", "body", "other"), CREATING, ids=IDS)
async def test_the_same_key_and_body_replay_the_first_answer_and_create_nothing_more(
    client: httpx.AsyncClient, storage: Storage, path: str, table: str, body: Callable[[], dict[str, Any]],
    other: Callable[[], dict[str, Any]],
) -> None:
    before = rows(storage, table)
    first = await client.post(path, json=body(), headers={"Idempotency-Key": "same-1"})
    assert first.status_code == 201, first.text
    again = await client.post(path, json=body(), headers={"Idempotency-Key": "same-1"})
    assert again.status_code == 201 and again.json() == first.json()
    assert again.headers["berth-replayed"] == "true" and "berth-replayed" not in first.headers
    assert again.headers["location"] == first.headers["location"]
    assert rows(storage, table) == before + 1
    fresh = await client.post(path, json=body(), headers={"Idempotency-Key": "same-2"})
    assert fresh.status_code in (200, 201)  # an identical catalog is answered 200, not stored twice


@pytest.mark.parametrize(("path", "table", "body", "other"), CREATING, ids=IDS)
async def test_the_same_key_with_another_body_is_a_422_naming_the_header(
    client: httpx.AsyncClient, storage: Storage, path: str, table: str, body: Callable[[], dict[str, Any]],
    other: Callable[[], dict[str, Any]],
) -> None:
    first = await client.post(path, json=body(), headers={"Idempotency-Key": "reused"})
    assert first.status_code == 201, first.text
    count = rows(storage, table)
    refused = problem_of(await client.post(path, json=other(), headers={"Idempotency-Key": "reused"}), 422)
    assert [error["field"] for error in refused["errors"]] == ["header.idempotency-key"]
    assert rows(storage, table) == count
    replay = await client.post(path, json=body(), headers={"Idempotency-Key": "reused"})
    assert replay.json() == first.json()


@pytest.mark.parametrize(("path", "table", "body", "other"), CREATING, ids=IDS)
async def test_a_body_the_route_refuses_keeps_no_key_for_a_corrected_retry(
    client: httpx.AsyncClient, storage: Storage, path: str, table: str, body: Callable[[], dict[str, Any]],
    other: Callable[[], dict[str, Any]],
) -> None:
    wrong = body()
    wrong["catalog_id"] = "cat_unknown"  # well formed, refused by the use case once the key is claimed
    if path == "/v1/sweeps":
        wrong = {**body(), "base": {**body()["base"], "catalog_id": "cat_unknown"}}
    if path == "/v1/catalogs":
        wrong = {**body(), "currency": "XXQ"}
    problem_of(await client.post(path, json=wrong, headers={"Idempotency-Key": "retry"}), 422)
    corrected = await client.post(path, json=body(), headers={"Idempotency-Key": "retry"})
    assert corrected.status_code == 201, corrected.text
