"""Who may do what (api.md, Auth): every route against every kind of caller. No key or a wrong key
is a 401 with a Bearer challenge; a key without the role is a 403; another team's quote is a 404,
never a 403; local mode (no keys at all) answers loopback callers only, as admin; a revoked key stops
working at once; each key has its own rate limit; and keys are kept only as their sha256."""

import copy
import hashlib
import math
from collections.abc import AsyncIterator, Callable
from dataclasses import dataclass, field
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import httpx
import pytest
from fastapi import FastAPI
from sqlalchemy import text

import service.api.auth
from service.api.app import create_app, prepare
from service.api.auth import LOCAL_MODE_RECHECK_SECONDS, LocalMode
from service.config import Settings
from service.storage.repository import Storage
from service.usecases.access import issue_key, revoke_key
from tests.api.conftest import START, FakeClock
from tests.api.problems import PROBLEM, problem_of
from tests.conftest import load_example

pytestmark = pytest.mark.anyio

TEAM = "language"  # the team of the demo campaign the quotes are filed for
OTHER_TEAM = "perception"
ELSEWHERE = ("203.0.113.5", 4000)  # a documentation address: not loopback

# Who calls: (role, team). The requester's team owns the seeded quote; the other requester's does not.
ACTORS: dict[str, tuple[str, str]] = {
    "requester": ("requester", TEAM),
    "other_requester": ("requester", OTHER_TEAM),
    "analyst": ("analyst", "finance"),
    "admin": ("admin", "platform"),
}


def bearer(key: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {key}"}




def expect_challenge(response: httpx.Response) -> None:
    problem_of(response, 401)
    assert response.headers["www-authenticate"].startswith("Bearer ")


def recheck_keys(app: FastAPI) -> None:
    """Make the next request look at the key table again instead of waiting out the 5 s recheck."""
    local_mode: LocalMode = app.state.local_mode
    local_mode._checked = -math.inf


def count_quotes(storage: Storage) -> int:
    with storage.reading() as repository:
        return repository.count_quotes()


# Request bodies for the routes that take one.

def quote_body() -> dict[str, Any]:
    body: dict[str, Any] = load_example("campaign-owned-wins.json")
    assert body["campaign"]["team"] == TEAM
    return body


def sweep_body() -> dict[str, Any]:
    return {"base": quote_body(), "grid": {"overrides.electricity_price_per_kwh": [0.1, 0.2]}}


def plan_body() -> dict[str, Any]:
    plan: dict[str, Any] = load_example("fleet-plan.json")
    plan.update({"samples": 40, "horizon_months": 12, "candidate_nodes": {"min": 0, "max": 16, "step": 4}})
    return plan


def catalog_body() -> dict[str, Any]:
    catalog: dict[str, Any] = copy.deepcopy(load_example("catalog.json"))
    catalog["name"] = "uploaded in an access test"
    return catalog


@dataclass(frozen=True)
class Route:
    method: str
    path: str  # the route's template, as FastAPI declares it
    allowed: dict[str, int]  # actor → the status it gets; actors not named get `refused`
    refused: int = 403
    body: Callable[[], dict[str, Any]] | None = None
    body_naming: Callable[[dict[str, str]], dict[str, Any]] | None = None  # a body that names a stored id
    uses: tuple[str, ...] = ()  # ids the body names

    def url(self, ids: dict[str, str]) -> str:
        return self.path.format(**ids, other_id=ids["quote_id"])

    def json(self, ids: dict[str, str]) -> dict[str, Any] | None:
        if self.body_naming is not None:
            return self.body_naming(ids)
        return self.body() if self.body else None

    def needs(self) -> set[str]:
        named = {name for name in ("quote_id", "sweep_id", "plan_id", "catalog_id") if "{" + name + "}" in self.path}
        return named | set(self.uses) | ({"quote_id"} if "{other_id}" in self.path else set())


EVERYONE_200 = {actor: 200 for actor in ACTORS}
OWN_TEAM_200 = {"requester": 200, "analyst": 200, "admin": 200}  # the other requester: 404
ANALYSTS = {"analyst": 200, "admin": 200}
ANALYSTS_CREATE = {"analyst": 201, "admin": 201}

ROUTES = [
    Route("POST", "/v1/catalogs", {"admin": 201}, body=catalog_body),
    Route("GET", "/v1/catalogs", EVERYONE_200),
    Route("GET", "/v1/catalogs/default", EVERYONE_200),
    Route("PUT", "/v1/catalogs/default", {"admin": 200}, body_naming=lambda ids: {"catalog_id": ids["catalog_id"]},
          uses=("catalog_id",)),
    Route("GET", "/v1/catalogs/{catalog_id}", EVERYONE_200),
    Route("PATCH", "/v1/catalogs/{catalog_id}", {"admin": 200}, body=lambda: {"status": "active"}),
    # The demo campaign is filed for TEAM: its requester may file it, the other team's may not.
    Route("POST", "/v1/quotes", {"requester": 201, "analyst": 201, "admin": 201}, body=quote_body),
    Route("GET", "/v1/quotes", EVERYONE_200),
    Route("GET", "/v1/quotes/{quote_id}", OWN_TEAM_200, refused=404),
    Route("GET", "/v1/quotes/{quote_id}/report", OWN_TEAM_200, refused=404),
    Route("GET", "/v1/quotes/{quote_id}/breakeven.svg", OWN_TEAM_200, refused=404),
    Route("GET", "/v1/quotes/{quote_id}/options.csv", OWN_TEAM_200, refused=404),
    Route("POST", "/v1/quotes/{quote_id}/recompute", OWN_TEAM_200, refused=404),
    Route("GET", "/v1/quotes/{quote_id}/compare/{other_id}", OWN_TEAM_200, refused=404),
    Route("POST", "/v1/quotes/{quote_id}/requote", {"requester": 201, "analyst": 201, "admin": 201}, refused=404,
          body_naming=lambda ids: {"catalog_id": ids["catalog_id"]}, uses=("catalog_id",)),
    Route("GET", "/v1/sweeps", ANALYSTS),
    Route("POST", "/v1/sweeps", ANALYSTS_CREATE, body=sweep_body),
    Route("GET", "/v1/sweeps/{sweep_id}", ANALYSTS),
    Route("GET", "/v1/sweeps/{sweep_id}/rows.csv", ANALYSTS),
    Route("GET", "/v1/fleet-plans", ANALYSTS),
    # The matrix's sweep is answered at once: a permitted cancel finds it finished (409).
    Route("DELETE", "/v1/sweeps/{sweep_id}", {"analyst": 409, "admin": 409}),
    Route("POST", "/v1/fleet-plans", ANALYSTS_CREATE, body=plan_body),
    Route("GET", "/v1/fleet-plans/{plan_id}", ANALYSTS),
    Route("GET", "/v1/fleet-plans/{plan_id}/chart.svg", ANALYSTS),
    Route("GET", "/v1/fleet-plans/{plan_id}/report", ANALYSTS),
]
ROUTE_IDS = [f"{r.method} {r.path}" for r in ROUTES]
# The other requester's refusals on quote routes are 404s; requesters on analyst routes get 403s.
OPEN_PATHS = ["/healthz", "/readyz", "/metrics"]


@dataclass
class World:
    app: FastAPI
    storage: Storage
    client: httpx.AsyncClient
    keys: dict[str, str] = field(default_factory=dict)
    ids: dict[str, str] = field(default_factory=dict)

    async def send(self, route: Route, *, headers: dict[str, str] | None = None) -> httpx.Response:
        ids = {name: self.ids.get(name, f"{name[:-3]}_missing") for name in ("quote_id", "sweep_id", "plan_id",
                                                                              "catalog_id")}
        return await self.client.request(route.method, route.url(ids), headers=headers, json=route.json(ids))

    async def seed(self, needs: set[str]) -> None:
        """Store what the route reads (as the admin), so a 404 can only mean "not yours"."""
        admin = bearer(self.keys["admin"])
        if "catalog_id" in needs:
            self.ids["catalog_id"] = (await self.client.get("/v1/catalogs", headers=admin)).json()["items"][0]["id"]
        for name, path, body in (("quote_id", "/v1/quotes", quote_body), ("sweep_id", "/v1/sweeps", sweep_body),
                                 ("plan_id", "/v1/fleet-plans", plan_body)):
            if name in needs:
                response = await self.client.post(path, json=body(), headers=admin)
                assert response.status_code == 201, response.text
                self.ids[name] = response.json()["id"]


@pytest.fixture
async def world(app: FastAPI, storage: Storage, client: httpx.AsyncClient) -> AsyncIterator[World]:
    keys = {actor: issue_key(storage, role=role, team=team, now=START)[1] for actor, (role, team) in ACTORS.items()}
    recheck_keys(app)
    yield World(app, storage, client, keys)


def test_the_matrix_covers_every_route_of_the_app(app: FastAPI) -> None:
    declared = {(method.upper(), path) for path, operations in app.openapi()["paths"].items()
                if path.startswith("/v1/") for method in operations}
    assert declared == {(r.method, r.path) for r in ROUTES}


@pytest.mark.parametrize("route", ROUTES, ids=ROUTE_IDS)
async def test_no_key_is_a_401_with_a_bearer_challenge(world: World, route: Route) -> None:
    expect_challenge(await world.send(route))


@pytest.mark.parametrize("route", ROUTES, ids=ROUTE_IDS)
async def test_an_unknown_key_is_a_401(world: World, route: Route) -> None:
    expect_challenge(await world.send(route, headers=bearer("berth_" + "x" * 43)))


@pytest.mark.parametrize("actor", list(ACTORS))
@pytest.mark.parametrize("route", ROUTES, ids=ROUTE_IDS)
async def test_each_role_gets_what_the_route_allows(world: World, route: Route, actor: str) -> None:
    await world.seed(route.needs())
    response = await world.send(route, headers=bearer(world.keys[actor]))
    expected = route.allowed.get(actor, route.refused)
    if expected < 400:
        assert response.status_code == expected, response.text
        assert response.headers["content-type"] != PROBLEM
    else:
        problem = problem_of(response, expected)
        if expected == 403 and route.path != "/v1/quotes":
            assert ACTORS[actor][0] in problem["detail"]  # the refusal names the role the key has


@pytest.mark.parametrize("route", [r for r in ROUTES if r.refused == 404], ids=lambda r: f"{r.method} {r.path}")
async def test_another_teams_quote_is_exactly_a_missing_quote(world: World, route: Route) -> None:
    await world.seed(route.needs())
    other = bearer(world.keys["other_requester"])
    theirs = await world.send(route, headers=other)
    missing = await world.client.request(route.method, route.url({"quote_id": "q_missing"}), headers=other,
                                         json=route.json(world.ids))
    hidden, absent = problem_of(theirs, 404), problem_of(missing, 404)
    assert hidden["detail"].replace(world.ids["quote_id"], "ID") == absent["detail"].replace("q_missing", "ID")
    assert {k: v for k, v in hidden.items() if k != "detail"} == {k: v for k, v in absent.items() if k != "detail"}
    assert TEAM not in theirs.text


async def test_a_requester_cannot_file_for_another_team_and_nothing_is_stored(world: World) -> None:
    before = count_quotes(world.storage)
    problem = problem_of(await world.client.post("/v1/quotes", json=quote_body(),
                                                 headers=bearer(world.keys["other_requester"])), 403)
    assert OTHER_TEAM in problem["detail"] and TEAM in problem["detail"]
    assert count_quotes(world.storage) == before
    own = quote_body()
    own["campaign"]["team"] = OTHER_TEAM
    filed = await world.client.post("/v1/quotes", json=own, headers=bearer(world.keys["other_requester"]))
    assert filed.status_code == 201, filed.text
    assert count_quotes(world.storage) == before + 1


async def test_a_requester_lists_its_own_teams_quotes_only(world: World) -> None:
    await world.seed({"quote_id"})  # filed for TEAM
    theirs = quote_body()
    theirs["campaign"]["team"] = OTHER_TEAM
    other = bearer(world.keys["other_requester"])
    own_id = (await world.client.post("/v1/quotes", json=theirs, headers=other)).json()["id"]

    async def listed(actor: str, **params: str) -> list[tuple[str, str]]:
        response = await world.client.get("/v1/quotes", params=params, headers=bearer(world.keys[actor]))
        assert response.status_code == 200, response.text
        return [(item["id"], item["team"]) for item in response.json()["items"]]

    assert await listed("other_requester", team=TEAM) == []
    assert await listed("other_requester") == [(own_id, OTHER_TEAM)]
    assert await listed("requester", team=OTHER_TEAM) == []
    assert await listed("requester") == [(world.ids["quote_id"], TEAM)]
    assert sorted(await listed("analyst")) == sorted([(world.ids["quote_id"], TEAM), (own_id, OTHER_TEAM)])
    assert await listed("admin", team=TEAM) == [(world.ids["quote_id"], TEAM)]


@pytest.mark.parametrize("header", ["Basic dXNlcjpwYXNz", "Bearer", "Bearer    ", "berth_abc", "Token berth_abc"])
async def test_malformed_authorization_is_a_401(world: World, header: str) -> None:
    expect_challenge(await world.client.get("/v1/catalogs", headers={"Authorization": header}))


async def test_the_scheme_is_case_insensitive(world: World) -> None:
    response = await world.client.get("/v1/catalogs", headers={"Authorization": f"bearer {world.keys['analyst']}"})
    assert response.status_code == 200, response.text


async def test_authentication_comes_before_validation(world: World) -> None:
    """An anonymous caller learns nothing about the body schema: a 401, not a 422."""
    expect_challenge(await world.client.post("/v1/quotes", json={"not": "a quote"}))
    problem_of(await world.client.post("/v1/sweeps", json={"not": "a sweep"},
                                       headers=bearer(world.keys["requester"])), 403)


@pytest.mark.parametrize("path", OPEN_PATHS)
async def test_probes_and_metrics_need_no_key(world: World, path: str) -> None:
    response = await world.client.get(path)
    assert response.status_code == 200, response.text
    async with httpx.AsyncClient(transport=httpx.ASGITransport(app=world.app, client=ELSEWHERE),
                                 base_url="http://berth.test") as remote:
        assert (await remote.get(path)).status_code == 200


# Local mode: no keys at all.

async def test_local_mode_answers_loopback_callers_as_admin(client: httpx.AsyncClient) -> None:
    assert (await client.get("/v1/quotes")).status_code == 200
    assert (await client.post("/v1/catalogs", json=catalog_body())).status_code == 201  # admin only
    assert (await client.post("/v1/sweeps", json=sweep_body())).status_code == 201  # analyst or admin
    ready = (await client.get("/readyz")).json()
    assert ready["access"].startswith("local mode")


@pytest.mark.parametrize("route", ROUTES, ids=ROUTE_IDS)
async def test_local_mode_refuses_every_route_to_a_caller_elsewhere(app: FastAPI, route: Route) -> None:
    async with httpx.AsyncClient(transport=httpx.ASGITransport(app=app, client=ELSEWHERE),
                                 base_url="http://berth.test") as remote:
        world = World(app, app.state.storage, remote)
        problem = problem_of(await world.send(route), 403)
    assert "loopback" in problem["detail"]


async def test_once_a_key_exists_requests_need_it(app: FastAPI, storage: Storage, client: httpx.AsyncClient) -> None:
    assert (await client.get("/v1/quotes")).status_code == 200
    _, key = issue_key(storage, role="analyst", team=TEAM, now=START)
    recheck_keys(app)
    expect_challenge(await client.get("/v1/quotes"))
    assert (await client.get("/v1/quotes", headers=bearer(key))).status_code == 200
    assert (await client.get("/readyz")).json()["access"] == "API keys"
    async with httpx.AsyncClient(transport=httpx.ASGITransport(app=app, client=ELSEWHERE),
                                 base_url="http://berth.test") as remote:
        assert (await remote.get("/v1/quotes", headers=bearer(key))).status_code == 200
        expect_challenge(await remote.get("/v1/quotes"))


class FakeMonotonic:
    def __init__(self) -> None:
        self.now = 1_000.0

    def __call__(self) -> float:
        return self.now


async def test_the_key_table_is_rechecked_at_most_every_few_seconds(
    app: FastAPI, storage: Storage, client: httpx.AsyncClient, monkeypatch: pytest.MonkeyPatch
) -> None:
    monotonic = FakeMonotonic()
    monkeypatch.setattr(service.api.auth, "time", SimpleNamespace(monotonic=monotonic))
    app.state.local_mode = LocalMode(storage)
    assert (await client.get("/v1/quotes")).status_code == 200
    issue_key(storage, role="analyst", team=TEAM, now=START)
    monotonic.now += LOCAL_MODE_RECHECK_SECONDS - 0.1
    assert (await client.get("/v1/quotes")).status_code == 200  # still the answer of the last check
    monotonic.now += 0.1
    expect_challenge(await client.get("/v1/quotes"))


async def test_a_revoked_key_is_a_401_at_once(world: World) -> None:
    stored, key = issue_key(world.storage, role="analyst", team=TEAM, now=START)
    assert (await world.client.get("/v1/catalogs", headers=bearer(key))).status_code == 200
    revoke_key(world.storage, stored.id, now=START)
    response = await world.client.get("/v1/catalogs", headers=bearer(key))
    expect_challenge(response)
    assert "revoked" in response.json()["detail"]
    assert (await world.client.get("/v1/catalogs", headers=bearer(world.keys["analyst"]))).status_code == 200


# Rate limits: a token bucket per key.

def app_with(database_url: str, clock: FakeClock, **settings: Any) -> FastAPI:
    app = create_app(Settings(database_url=database_url, **settings), clock=clock)
    prepare(app)
    return app


async def test_each_key_has_its_own_rate_limit(database_url: str, clock: FakeClock) -> None:
    app = app_with(database_url, clock, rate_limit_burst=3, rate_limit_per_second=0.01)
    storage: Storage = app.state.storage
    _, first = issue_key(storage, role="analyst", team=TEAM, now=START)
    _, second = issue_key(storage, role="requester", team=TEAM, now=START)
    recheck_keys(app)
    try:
        async with httpx.AsyncClient(transport=httpx.ASGITransport(app=app), base_url="http://berth.test") as client:
            for _ in range(3):
                assert (await client.get("/v1/catalogs", headers=bearer(first))).status_code == 200
            limited = await client.get("/v1/catalogs", headers=bearer(first))
            problem_of(limited, 429)
            retry_after = limited.headers["retry-after"]
            assert retry_after.isdigit(), retry_after
            assert 1 <= int(retry_after) <= math.ceil(1 / 0.01)
            assert (await client.get("/v1/catalogs", headers=bearer(second))).status_code == 200
            assert (await client.get("/healthz")).status_code == 200  # probes are outside the limits
    finally:
        storage.dispose()


async def test_local_mode_has_no_rate_limit(database_url: str, clock: FakeClock) -> None:
    app = app_with(database_url, clock, rate_limit_burst=3, rate_limit_per_second=0.01)
    try:
        async with httpx.AsyncClient(transport=httpx.ASGITransport(app=app), base_url="http://berth.test") as client:
            statuses = [(await client.get("/v1/catalogs")).status_code for _ in range(6)]
        assert statuses == [200] * 6
    finally:
        app.state.storage.dispose()


# Keys at rest.

async def test_keys_are_stored_only_as_their_sha256(storage: Storage) -> None:
    issued = [issue_key(storage, role=role, team=TEAM, now=START) for role in ("requester", "analyst", "admin")]
    keys = [key for _, key in issued]
    assert len(set(keys)) == 3
    assert all(key.startswith("berth_") and len(key) >= 40 for key in keys)
    with storage.engine.connect() as connection:
        rows = {row["id"]: dict(row) for row in connection.execute(text("SELECT * FROM api_key")).mappings()}
    assert set(rows) == {stored.id for stored, _ in issued}
    for stored, key in issued:
        row = rows[stored.id]
        assert row["key_hash"] == hashlib.sha256(key.encode("utf-8")).hexdigest()
        for other in keys:
            assert all(other not in str(value) for value in row.values())
    if storage.engine.dialect.name == "sqlite":  # and nowhere in the files: the database and its WAL
        database = Path(str(storage.engine.url.database))
        on_disk = b"".join(path.read_bytes() for path in database.parent.glob(database.name + "*"))
        assert len(on_disk) > 0
        assert all(key.encode() not in on_disk for key in keys)
