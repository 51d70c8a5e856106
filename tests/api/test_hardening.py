"""What an attack on a live server found (issue 18), in-process: each test names the row of the issue
it pins. Rows that need a real server process (1, 3, 5, 6, 12, 13) are in tests/e2e/test_hardening.py."""

import copy
import io
import json
import stat
import threading
from collections.abc import Callable
from pathlib import Path
from typing import Any

import anyio
import httpx
import pytest
from fastapi import FastAPI
from sqlalchemy import event, text

import service.api.routers.quotes
from service.api.app import create_app, prepare
from service.config import Settings
from service.reports.breakeven_chart import breakeven_svg
from service.reports.html import render_report
from service.storage.repository import Storage
from service.usecases.access import issue_key
from tests.api.conftest import FakeClock
from tests.api.problems import problem_of
from tests.api.test_access import recheck_keys
from tests.conftest import load_example
from tests.databases import sqlite_only

pytestmark = pytest.mark.anyio


def with_value(body: dict[str, Any], path: str, value: Any) -> dict[str, Any]:
    changed = copy.deepcopy(body)
    *parents, last = path.split(".")
    node: Any = changed
    for part in parents:
        node = node[int(part)] if isinstance(node, list) else node.setdefault(part, {})
    if isinstance(node, list):
        node[int(last)] = value
    else:
        node[last] = value
    return changed


def count(storage: Storage, table: str) -> int:
    with storage.engine.connect() as connection:
        return int(connection.execute(text(f"SELECT COUNT(*) FROM {table}")).scalar_one())


def fields_of(problem: dict[str, Any]) -> list[str]:
    return [error["field"] for error in problem.get("errors", [])]


# Row 2: an absurd catalog is refused, naming the field, and quoting goes on.

@pytest.mark.parametrize(("path", "value"), [
    ("sites.0.nodes_max", 10**12),
    ("sites.0.nodes_owned", 10**12),
    ("offers.0.nodes_max", 10**12),
    ("node_types.0.accelerators_per_node", 10**9),
    ("sites.0.depreciation_months", 10**9),
    ("offers.0.committed", [{"months": m, "per_accelerator_hour": 1.0} for m in range(1, 40)]),
    ("sites.0.capex.node_price", 1e25),
    ("accelerators.0.memory_gb", 1e300),
])
async def test_row_2_an_absurd_catalog_is_a_422_naming_the_field_and_quoting_goes_on(
    client: httpx.AsyncClient, storage: Storage, demo_catalog: dict[str, Any], owned_wins_request: dict[str, Any],
    path: str, value: Any,
) -> None:
    before = count(storage, "catalog")
    problem = problem_of(await client.post("/v1/catalogs", json=with_value(demo_catalog, path, value)), 422)
    assert any(field.startswith(path) for field in fields_of(problem)), problem
    assert count(storage, "catalog") == before
    assert (await client.post("/v1/quotes", json=owned_wins_request)).status_code == 201


# Row 4: NUL characters are a 422 naming the field (PostgreSQL cannot store or compare them).

@pytest.mark.parametrize(("path", "field"), [
    ("campaign.name", "campaign.name"), ("campaign.team", "campaign.team"),
    ("campaign.work.precision", "campaign.work.precision"),
])
async def test_row_4_a_nul_in_a_quote_request_is_a_422_naming_the_field(
    client: httpx.AsyncClient, storage: Storage, owned_wins_request: dict[str, Any], path: str, field: str
) -> None:
    problem = problem_of(await client.post("/v1/quotes", json=with_value(owned_wins_request, path, "a\u0000b")), 422)
    assert field in fields_of(problem)
    assert count(storage, "quote") == 0


@pytest.mark.parametrize(("url", "params", "field"), [
    ("/v1/quotes", {"team": "a\u0000"}, "query.team"),
    ("/v1/quotes", {"campaign_name": "a\u0000"}, "query.campaign_name"),
    ("/v1/quotes", {"cursor": "a\u0000"}, "query.cursor"),
    ("/v1/catalogs", {"cursor": "a\u0000"}, "query.cursor"),
    ("/v1/quotes/q_a%00b", {}, "path.quote_id"),
    ("/v1/catalogs/cat_a%00b", {}, "path.catalog_id"),
    ("/v1/sweeps/sw_a%00b", {}, "path.sweep_id"),
    ("/v1/fleet-plans/fp_a%00b", {}, "path.plan_id"),
])
async def test_row_4_a_nul_in_a_filter_cursor_or_id_is_a_422_naming_it(
    client: httpx.AsyncClient, url: str, params: dict[str, str], field: str
) -> None:
    problem = problem_of(await client.get(url, params=params), 422)
    assert field in fields_of(problem)


async def test_row_4_a_nul_in_a_catalog_or_a_fleet_plan_is_a_422(
    client: httpx.AsyncClient, demo_catalog: dict[str, Any]
) -> None:
    for path in ("name", "offers.0.provider", "offers.0.region", "sites.0.name"):
        problem = problem_of(await client.post("/v1/catalogs", json=with_value(demo_catalog, path, "x\u0000")), 422)
        assert path in fields_of(problem)
    plan = with_value(load_example("fleet-plan.json"), "demand", {"from_quotes": ["q_\u0000"]})
    problem = problem_of(await client.post("/v1/fleet-plans", json=plan), 422)
    assert "demand.from_quotes.0" in fields_of(problem)


# Row 7: integers at or beyond 2**63 are a 422 naming the field.

@pytest.mark.parametrize(("url", "body", "path"), [
    ("/v1/quotes", "campaign-owned-wins.json", "campaign.runs.count"),
    ("/v1/quotes", "campaign-owned-wins.json", "campaign.work.layers"),
    ("/v1/quotes", "campaign-owned-wins.json", "campaign.data.checkpoints_kept"),
    ("/v1/quotes", "campaign-owned-wins.json", "options.max_accelerators"),
    ("/v1/quotes", "campaign-owned-wins.json", "options.fixed_accelerators"),
    ("/v1/fleet-plans", "fleet-plan.json", "samples"),
    ("/v1/fleet-plans", "fleet-plan.json", "candidate_nodes.step"),
    ("/v1/fleet-plans", "fleet-plan.json", "candidate_nodes.min"),
    ("/v1/catalogs", "catalog.json", "sites.0.depreciation_months"),
    ("/v1/catalogs", "catalog.json", "offers.0.committed.0.months"),
])
async def test_row_7_an_integer_of_2_to_the_63_is_a_422_naming_the_field(
    client: httpx.AsyncClient, url: str, body: str, path: str
) -> None:
    for value in (2**63, 2**64 + 1):
        problem = problem_of(await client.post(url, json=with_value(load_example(body), path, value)), 422)
        assert path in fields_of(problem), problem


# Row 8: edge inputs are 4xx problems.

@pytest.mark.parametrize("params", [
    {"created_from": "0001-01-01T00:00:00+23:59"},
    {"created_to": "9999-12-31T23:59:59-23:59"},
])
async def test_row_8_a_date_filter_beyond_the_calendar_in_utc_is_a_422(
    client: httpx.AsyncClient, params: dict[str, str]
) -> None:
    problem = problem_of(await client.get("/v1/quotes", params=params), 422)
    assert fields_of(problem) == [f"query.{next(iter(params))}"]


async def test_row_8_a_negative_zero_spread_is_zero(client: httpx.AsyncClient,
                                                   owned_wins_request: dict[str, Any]) -> None:
    sweep = {"base": owned_wins_request, "samples": 10,
             "distributions": {"overrides.utilisation": {"kind": "lognormal", "mean": -1.0, "sigma": -0.0}}}
    answered = await client.post("/v1/sweeps", json=sweep)
    assert answered.status_code == 201, answered.text
    plan = with_value(with_value(load_example("fleet-plan.json"), "demand.spread", -0.0), "samples", 10)
    assert (await client.post("/v1/fleet-plans", json=plan)).status_code == 201


@pytest.mark.parametrize("content_type", ["application/json", "application/yaml"])
async def test_row_8_a_deeply_nested_catalog_is_a_422(client: httpx.AsyncClient, content_type: str) -> None:
    depth = 100_000
    body = ('{"a":' * depth + "null" + "}" * depth) if content_type.endswith("json") else (
        "a: " + "[" * depth + "]" * depth)
    problem = problem_of(await client.post("/v1/catalogs", content=body, headers={"content-type": content_type}),
                         422)
    assert fields_of(problem) == ["(body)"]


async def test_row_8_a_lone_surrogate_in_an_id_is_a_422(client: httpx.AsyncClient,
                                                        owned_wins_request: dict[str, Any]) -> None:
    raw = json.dumps(with_value(owned_wins_request, "catalog_id", "SURROGATE")).replace("SURROGATE", "cat_\\ud800")
    response = await client.post("/v1/quotes", content=raw, headers={"content-type": "application/json"})
    assert "catalog_id" in fields_of(problem_of(response, 422))


async def test_row_8_a_catalog_of_zero_costs_quotes_and_renders(
    client: httpx.AsyncClient, demo_catalog: dict[str, Any]
) -> None:
    free = copy.deepcopy(demo_catalog)
    free["finance"] = {"cost_of_capital_annual": 0}
    for site in free["sites"]:
        site.update(electricity_price_per_kwh=0, staff_cost_per_node_year=0, maintenance_fraction_per_year=0,
                    egress_per_gb=0, facility={"kind": "colocation", "price_per_kw_month": 0})
        site["capex"] = {"node_price": 5e-324}  # the smallest the schema lets in: every owned option is free
    for offer in free["offers"]:
        offer.update(storage_per_gb_month=0, ingress_per_gb=0, egress_per_gb=0)
    stored = await client.post("/v1/catalogs", json=free)
    assert stored.status_code == 201, stored.text
    for example in ("campaign-owned-wins.json", "campaign-recurring.json"):
        body = {**load_example(example), "catalog_id": stored.json()["id"]}
        quoted = await client.post("/v1/quotes", json=body)
        assert quoted.status_code == 201, quoted.text  # two free options tie: there was a 0/0 in the why
        for suffix in ("/report", "/breakeven.svg", "/options.csv"):
            assert (await client.get(f"/v1/quotes/{quoted.json()['id']}{suffix}")).status_code == 200


# Row 9: plausibility bounds refuse absurd inputs up front, and whatever is accepted renders.

@pytest.mark.parametrize("override", [
    "node_price_factor", "electricity_price_per_kwh", "rented_price_factor", "on_demand_price_factor",
    "mtbf_hours", "network_gbps", "grid_kgco2e_per_kwh",
])
async def test_row_9_an_absurd_override_is_a_422_in_a_quote_and_in_a_sweep(
    client: httpx.AsyncClient, storage: Storage, owned_wins_request: dict[str, Any], override: str
) -> None:
    body = {**owned_wins_request, "overrides": {override: 1e25}}
    assert fields_of(problem_of(await client.post("/v1/quotes", json=body), 422)) == [f"overrides.{override}"]
    sweep = {"base": owned_wins_request, "grid": {f"overrides.{override}": [1.0, 1e25]}}
    assert fields_of(problem_of(await client.post("/v1/sweeps", json=sweep), 422)) == [f"grid.overrides.{override}"]
    assert count(storage, "quote") == 0


async def test_row_9_a_quote_with_figures_beyond_28_digits_renders(
    client: httpx.AsyncClient, owned_wins_request: dict[str, Any]
) -> None:
    document = (await client.post("/v1/quotes", json=owned_wins_request)).json()

    def inflate(node: Any) -> Any:
        if isinstance(node, dict):
            return {k: inflate(v) if k != "year" else v for k, v in node.items()}
        if isinstance(node, list):
            return [inflate(v) for v in node]
        return node * 1e25 if isinstance(node, float) and node > 1.0 else node

    huge = {**document, "options": inflate(document["options"]), "breakeven": inflate(document["breakeven"])}
    assert "<html" in render_report(huge)
    assert breakeven_svg(huge).startswith("<?xml")


# Row 10: a 503 for a time-out stores nothing.

async def test_row_10_a_quote_that_times_out_is_never_stored(
    make_client: Callable[..., Any], monkeypatch: pytest.MonkeyPatch, owned_wins_request: dict[str, Any]
) -> None:
    entered, release, finished = threading.Event(), threading.Event(), threading.Event()
    create = service.api.routers.quotes.create_quote

    def held_create(*args: Any, **kwargs: Any) -> Any:
        entered.set()
        try:
            release.wait(60.0)  # past the time limit, then the quote is computed and offered for storage
            return create(*args, **kwargs)
        finally:
            finished.set()

    monkeypatch.setattr(service.api.routers.quotes, "create_quote", held_create)
    # The limit must leave the retry's real quote time to finish on a loaded machine (0.3 s did not,
    # once in four full runs); the first request times out whatever the limit, as it is held.
    async with make_client(request_timeout_seconds=1.0) as (app, client):
        response = await client.post("/v1/quotes", json=owned_wins_request, headers={"Idempotency-Key": "slow-1"})
        problem_of(response, 503)
        assert entered.is_set() and not finished.is_set()
        release.set()
        assert await anyio.to_thread.run_sync(finished.wait, 60.0)
        await anyio.sleep(0.05)
        storage: Storage = app.state.storage
        assert count(storage, "quote") == 0
        # The key's claim was released with the refusal: the retry runs at once and stores one quote.
        monkeypatch.setattr(service.api.routers.quotes, "create_quote", create)
        retried = await client.post("/v1/quotes", json=owned_wins_request, headers={"Idempotency-Key": "slow-1"})
        assert retried.status_code == 201, retried.text
        assert count(storage, "quote") == 1


def test_row_10_the_commit_gate_lets_exactly_one_of_a_time_out_and_a_final_commit_win() -> None:
    from service.storage.gate import CommitGate  # here, so the other tests of the file run on older code

    late = CommitGate()
    assert late.expire()
    assert not late.enter()  # the 503 went out: nothing commits
    claimed_then_late = CommitGate()
    assert claimed_then_late.enter()
    claimed_then_late.leave(final=False)  # an Idempotency-Key claim leaves the time limit armed
    assert claimed_then_late.expire()
    stored = CommitGate()
    assert stored.enter()
    assert not stored.expire()  # committing: the answer will name what was stored
    stored.leave(final=True)
    assert not stored.expire()
    assert stored.enter()


# Row 11: a 500 carries the request id, is logged with it, and does not break the connection.

async def test_row_11_an_unexpected_error_is_a_500_with_the_request_id_on_the_answer_and_every_log_line(
    client: httpx.AsyncClient, monkeypatch: pytest.MonkeyPatch, json_log: io.StringIO
) -> None:
    def broken(*_args: Any, **_kwargs: Any) -> Any:
        raise RuntimeError("a bug")

    monkeypatch.setattr(service.api.routers.quotes, "find_quotes", broken)
    # The transport raises whatever the application lets escape: the connection would be reset.
    response = await client.get("/v1/quotes", headers={"X-Request-ID": "boom-1"})
    problem = problem_of(response, 500)
    assert "a bug" not in json.dumps(problem)
    assert response.headers["x-request-id"] == "boom-1"
    lines = [json.loads(line) for line in json_log.getvalue().splitlines()]
    assert lines and all(line["request_id"] == "boom-1" for line in lines)
    assert any("RuntimeError" in line.get("error", "") for line in lines), lines
    assert (await client.get("/healthz")).status_code == 200


# Unknown API keys are limited per client address, in bounded memory.

async def test_unknown_keys_from_one_address_are_limited_and_other_addresses_are_not(
    database_url: str, clock: FakeClock
) -> None:
    app = create_app(Settings(database_url=database_url, auth_failure_burst=5, auth_failures_per_minute=1),
                     clock=clock)
    prepare(app)
    storage: Storage = app.state.storage
    _, key = issue_key(storage, role="analyst", team="pricing", now=clock())
    recheck_keys(app)
    wrong = {"Authorization": "Bearer berth_" + "x" * 43}

    def client_at(address: str) -> httpx.AsyncClient:
        transport = httpx.ASGITransport(app=app, client=(address, 40_000))
        return httpx.AsyncClient(transport=transport, base_url="http://berth.test")

    try:
        async with client_at("198.51.100.7") as attacker, client_at("198.51.100.8") as neighbour:
            for _ in range(5):
                assert (await attacker.get("/v1/catalogs", headers=wrong)).status_code == 401
            limited = await attacker.get("/v1/catalogs", headers=wrong)
            problem_of(limited, 429)
            assert 1 <= int(limited.headers["retry-after"]) <= 60
            assert (await neighbour.get("/v1/catalogs", headers=wrong)).status_code == 401
            good = {"Authorization": f"Bearer {key}"}
            assert (await neighbour.get("/v1/catalogs", headers=good)).status_code == 200
            assert (await attacker.get("/healthz")).status_code == 200  # probes are outside every limit
    finally:
        storage.dispose()


def test_the_failure_limiter_forgets_the_least_recent_address_beyond_its_bound() -> None:
    from service.api.auth import RateLimiter

    limiter = RateLimiter(per_second=1e-6, burst=1, remember=3)
    assert limiter.retry_after("a") == 0 and limiter.retry_after("a") > 0
    for other in ("b", "c", "d"):
        limiter.retry_after(other)
    assert limiter.retry_after("a") == 0  # forgotten: a fresh bucket, and memory stayed at three


# The SQLite file is readable by its owner only, unless configured.

@pytest.mark.parametrize(("configured", "expected"), [(None, 0o600), ("640", 0o640)])
def test_the_sqlite_file_is_created_owner_only_unless_configured(
    tmp_path: Path, configured: str | None, expected: int
) -> None:
    path = tmp_path / "fresh" / "berth.db"
    extra = {} if configured is None else {"sqlite_file_mode": configured}
    app = create_app(Settings(database_url=f"sqlite:///{path}", **extra))
    prepare(app)  # migrated and the demo catalog written: the WAL exists too
    try:
        for file in (path, path.with_name("berth.db-wal")):
            assert stat.S_IMODE(file.stat().st_mode) == expected, file
    finally:
        app.state.storage.dispose()


# Row 12 (in-process; tests/e2e fills a real file system): a full database is a 503 saying so, and
# the service is not ready until writes succeed again.

@sqlite_only
async def test_row_12_a_full_database_is_a_503_and_not_ready_until_writes_succeed(
    app: FastAPI, client: httpx.AsyncClient, storage: Storage, owned_wins_request: dict[str, Any]
) -> None:
    with storage.engine.connect() as connection:
        pages = int(connection.exec_driver_sql("PRAGMA page_count").scalar_one())

    def cap(dbapi_connection: Any, _record: Any) -> None:
        # SQLite's own page quota: past it, writes fail with SQLITE_FULL exactly as on a full disk.
        dbapi_connection.execute(f"PRAGMA max_page_count = {pages + 8}")

    event.listen(storage.engine, "connect", cap)
    storage.engine.dispose()
    accepted, refused = 0, None
    for _ in range(200):
        response = await client.post("/v1/quotes", json=owned_wins_request)
        if response.status_code != 201:
            refused = response
            break
        accepted += 1
    assert refused is not None, "the capped database never filled"
    problem = problem_of(refused, 503)
    assert problem["title"] == "Storage full" and "nothing was stored" in problem["detail"]
    assert refused.headers["retry-after"] == "30"
    readiness = await client.get("/readyz")
    assert readiness.status_code == 503 and readiness.json()["checks"]["storage"] == "full"
    event.remove(storage.engine, "connect", cap)
    storage.engine.dispose()
    readiness = await client.get("/readyz")
    assert readiness.status_code == 200, readiness.text
    assert count(storage, "quote") == accepted
    with storage.engine.connect() as connection:
        assert connection.exec_driver_sql("PRAGMA integrity_check").scalar_one() == "ok"


# Row 3 (in-process; tests/e2e loads a real server): answers and stored rows are capped.

async def test_row_3_an_answer_over_the_stored_size_limit_is_a_422_and_stores_nothing(
    make_client: Callable[..., Any], owned_wins_request: dict[str, Any]
) -> None:
    async with make_client(max_document_bytes=20_000) as (app, client):
        problem = problem_of(await client.post("/v1/quotes", json=owned_wins_request), 422)
        assert fields_of(problem) == ["(body)"] and "20,000" in problem["errors"][0]["reason"]
        assert count(app.state.storage, "quote") == 0


async def test_row_3_a_fleet_plan_over_the_candidate_limit_is_a_422(client: httpx.AsyncClient) -> None:
    plan = with_value(load_example("fleet-plan.json"), "candidate_nodes", {"min": 0, "max": 500_000, "step": 1})
    plan["samples"] = 1
    problem = problem_of(await client.post("/v1/fleet-plans", json=plan), 422)
    assert fields_of(problem) == ["candidate_nodes"] and "2,000" in problem["errors"][0]["reason"]
