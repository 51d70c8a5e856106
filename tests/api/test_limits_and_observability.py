"""Limits and what operators see (conventions.md): bodies over 1 MiB, pages, sweeps and fleet plans
over their limits, and requests over their time are refused with problems that change nothing;
every response carries a request id; /metrics exposes the HTTP metrics and the domain's counters,
which move when quotes, sweeps, fleet plans and errors happen; each request logs one JSON line."""

import asyncio
import copy
import io
import json
import re
import subprocess
import sys
import threading
import time
from collections.abc import AsyncIterator, Callable
from pathlib import Path
from typing import Any

import anyio
import httpx
import pytest
from prometheus_client.parser import text_string_to_metric_families
from sqlalchemy import text

import service.api.routers.sweeps
from service.storage.repository import Storage
from tests.api.problems import problem_of
from tests.conftest import load_example

pytestmark = pytest.mark.anyio

MIB = 1024 * 1024
REPO = Path(__file__).resolve().parents[2]




def rows(storage: Storage, table: str) -> int:
    assert table in {"catalog", "quote", "sweep", "fleet_plan"}
    with storage.engine.connect() as connection:
        found: int = connection.execute(text(f"SELECT COUNT(*) FROM {table}")).scalar_one()
    return found


def stored_rows(storage: Storage) -> dict[str, int]:
    return {table: rows(storage, table) for table in ("catalog", "quote", "sweep", "fleet_plan")}


def small_grid() -> dict[str, Any]:
    """3 × 4 = 12 scenarios."""
    return {"base": load_example("campaign-owned-wins.json"),
            "grid": {"overrides.electricity_price_per_kwh": [0.08, 0.12, 0.20],
                     "campaign.work.tokens": [1e11, 2e11, 4e11, 1e12]}}


def monte_carlo(samples: int) -> dict[str, Any]:
    sweep: dict[str, Any] = load_example("sweep-electricity-and-utilisation.json")
    sweep["samples"] = samples
    return sweep


def plan_request() -> dict[str, Any]:
    """49 sizes × 40 samples × 12 months = 23,520 cells."""
    plan: dict[str, Any] = load_example("fleet-plan.json")
    plan.update({"samples": 40, "horizon_months": 12})
    return plan


# Body size.

def padded(body: dict[str, Any], size: int) -> bytes:
    """The body as JSON, padded with trailing whitespace (still valid JSON) to exactly `size` bytes."""
    raw = json.dumps(body).encode("utf-8")
    assert len(raw) <= size
    return raw + b" " * (size - len(raw))


async def test_a_body_over_1_mib_with_content_length_is_a_413_and_stores_nothing(
    client: httpx.AsyncClient, storage: Storage, owned_wins_request: dict[str, Any]
) -> None:
    before = stored_rows(storage)
    response = await client.post("/v1/quotes", content=padded(owned_wins_request, MIB + 1),
                                 headers={"content-type": "application/json"})
    assert response.request.headers["content-length"] == str(MIB + 1)
    assert "1,048,576" in problem_of(response, 413)["detail"]
    assert stored_rows(storage) == before


@pytest.mark.parametrize("path", ["/v1/quotes", "/v1/catalogs"])
async def test_a_chunked_body_over_1_mib_is_a_413_and_stores_nothing(
    client: httpx.AsyncClient, storage: Storage, owned_wins_request: dict[str, Any], path: str
) -> None:
    body = padded(owned_wins_request, 2 * MIB)

    async def chunks() -> AsyncIterator[bytes]:
        for start in range(0, len(body), 64 * 1024):
            yield body[start:start + 64 * 1024]

    before = stored_rows(storage)
    response = await client.post(path, content=chunks(), headers={"content-type": "application/json"})
    assert "content-length" not in response.request.headers
    assert response.request.headers["transfer-encoding"] == "chunked"
    problem_of(response, 413)
    assert stored_rows(storage) == before


async def test_a_body_just_under_the_limit_is_accepted(
    client: httpx.AsyncClient, storage: Storage, owned_wins_request: dict[str, Any]
) -> None:
    response = await client.post("/v1/quotes", content=padded(owned_wins_request, MIB),
                                 headers={"content-type": "application/json"})
    assert response.status_code == 201, response.text
    assert rows(storage, "quote") == 1


# Pages, sweeps and fleet plans.

@pytest.mark.parametrize("path", ["/v1/quotes", "/v1/catalogs"])
async def test_a_page_over_the_cap_is_a_422_naming_limit(client: httpx.AsyncClient, path: str) -> None:
    assert (await client.get(path, params={"limit": 200})).status_code == 200
    problem = problem_of(await client.get(path, params={"limit": 201}), 422)
    assert [error["field"].split(".")[-1] for error in problem["errors"]] == ["limit"]
    assert "200" in problem["errors"][0]["reason"]


@pytest.mark.parametrize(("sweep", "field", "scenarios"), [
    (small_grid(), "grid", 12),
    (monte_carlo(11), "samples", 11),
])
async def test_a_sweep_over_the_scenario_limit_is_a_422_naming_the_limit(
    make_client: Callable[..., Any], sweep: dict[str, Any], field: str, scenarios: int
) -> None:
    async with make_client(sweep_max_scenarios=10) as (app, client):
        before = stored_rows(app.state.storage)
        problem = problem_of(await client.post("/v1/sweeps", json=sweep), 422)
        assert problem["errors"] == [{"field": field,
                                      "reason": f"{scenarios} scenarios exceed the limit of 10 per sweep"}]
        assert stored_rows(app.state.storage) == before
        at_the_limit = copy.deepcopy(sweep)
        if field == "grid":
            at_the_limit["grid"]["campaign.work.tokens"] = [1e11, 2e11, 4e11]  # 3 × 3 = 9
        else:
            at_the_limit["samples"] = 10
        assert (await client.post("/v1/sweeps", json=at_the_limit)).status_code == 201


async def test_a_fleet_plan_over_the_cell_limit_is_a_422(make_client: Callable[..., Any]) -> None:
    async with make_client(fleet_max_cells=20_000) as (app, client):
        before = stored_rows(app.state.storage)
        problem = problem_of(await client.post("/v1/fleet-plans", json=plan_request()), 422)
        assert problem["errors"] == [{"field": "candidate_nodes",
                                      "reason": "23,520 sizes × samples × months exceed the limit of 20,000"}]
        assert stored_rows(app.state.storage) == before
        smaller = plan_request()
        smaller["samples"] = 34  # 49 × 34 × 12 = 19,992
        assert (await client.post("/v1/fleet-plans", json=smaller)).status_code == 201


# Time limit.

async def test_a_request_that_does_not_answer_in_time_is_a_503_with_retry_after(
    make_client: Callable[..., Any], monkeypatch: pytest.MonkeyPatch
) -> None:
    entered, release, finished = threading.Event(), threading.Event(), threading.Event()
    submit = service.api.routers.sweeps.submit_sweep

    def observed_submit(*args: Any, **kwargs: Any) -> Any:
        # Held until the 503 is in: the handler is certainly still running when the limit strikes,
        # however slowly the machine reaches it (a limit of a few ms made that a race).
        entered.set()
        try:
            release.wait(60.0)
            return submit(*args, **kwargs)
        finally:
            finished.set()

    # The handler runs on a worker thread that the time limit cannot stop; the test waits for it.
    monkeypatch.setattr(service.api.routers.sweeps, "submit_sweep", observed_submit)
    async with make_client(request_timeout_seconds=0.5, sweep_answer_at_once=1_000_000) as (_app, client):
        started = time.perf_counter()
        response = await client.post("/v1/sweeps", json=monte_carlo(5_000), headers={"X-Request-ID": "slow-1"})
        answered_after = time.perf_counter() - started
        problem = problem_of(response, 503)
        assert "0.5 s" in problem["detail"]
        assert response.headers["retry-after"].isdigit()
        assert response.headers["x-request-id"] == "slow-1"
        was_running = entered.is_set() and not finished.is_set()
        release.set()
        assert await anyio.to_thread.run_sync(finished.wait, 120.0), "the sweep never finished"
        assert was_running, f"the sweep was not running when the 503 came ({answered_after:.2f} s)"
        assert (await client.get("/healthz")).status_code == 200
        await asyncio.sleep(0.05)  # let the worker hand its (discarded) answer back to the loop


# Request ids.

async def test_a_given_request_id_is_echoed(client: httpx.AsyncClient) -> None:
    for path in ("/healthz", "/v1/quotes", "/v1/quotes/q_missing"):
        response = await client.get(path, headers={"X-Request-ID": "trace-7f3a"})
        assert response.headers["x-request-id"] == "trace-7f3a", path


async def test_a_request_id_is_generated_when_none_or_an_unusable_one_is_given(client: httpx.AsyncClient) -> None:
    seen = set()
    for headers in ({}, {"X-Request-ID": "x" * 129}, {"X-Request-ID": ""}):
        generated = (await client.get("/healthz", headers=headers)).headers["x-request-id"]
        assert re.fullmatch(r"[0-9a-f]{32}", generated), generated
        seen.add(generated)
    assert len(seen) == 3


async def test_a_refused_body_still_carries_its_request_id(
    client: httpx.AsyncClient, owned_wins_request: dict[str, Any]
) -> None:
    response = await client.post("/v1/quotes", content=padded(owned_wins_request, MIB + 1),
                                 headers={"content-type": "application/json", "X-Request-ID": "big-1"})
    problem_of(response, 413)
    assert response.headers["x-request-id"] == "big-1"


# Metrics.

def scrape(text_body: str) -> dict[tuple[str, frozenset[tuple[str, str]]], float]:
    samples = {}
    for family in text_string_to_metric_families(text_body):
        for sample in family.samples:
            samples[(sample.name, frozenset(sample.labels.items()))] = sample.value
    return samples


async def metrics(client: httpx.AsyncClient) -> dict[tuple[str, frozenset[tuple[str, str]]], float]:
    response = await client.get("/metrics")
    assert response.status_code == 200
    assert response.headers["content-type"].startswith("text/plain")
    return scrape(response.text)


def value(samples: dict[tuple[str, frozenset[tuple[str, str]]], float], name: str, **labels: str) -> float:
    return samples.get((name, frozenset(labels.items())), 0.0)


async def test_metrics_expose_http_and_domain_metrics(client: httpx.AsyncClient) -> None:
    await client.get("/v1/quotes")
    response = await client.get("/metrics")
    for name, kind in (("http_requests_total", "counter"), ("http_request_duration_seconds", "histogram"),
                       ("berth_quotes_created_total", "counter"), ("berth_quote_seconds", "histogram"),
                       ("berth_sweep_scenarios_total", "counter"), ("berth_fleet_plans_total", "counter"),
                       ("berth_errors_total", "counter")):
        assert f"# TYPE {name} {kind}" in response.text, name
    names = {name for name, _ in scrape(response.text)}
    assert {"berth_quotes_created_total", "berth_quote_seconds_count", "berth_sweep_scenarios_total",
            "berth_fleet_plans_total"} <= names


HTTP_METRICS_SCRIPT = """
import asyncio, sys
import httpx
from service.api.app import create_app, prepare
from service.config import Settings

async def main() -> None:
    app = create_app(Settings(database_url=sys.argv[1]))
    prepare(app)
    async with httpx.AsyncClient(transport=httpx.ASGITransport(app=app), base_url="http://berth.test") as client:
        for path in ("/v1/quotes", "/v1/quotes", "/v1/quotes/q_missing", "/healthz", "/metrics"):
            await client.get(path)
        sys.stdout.write((await client.get("/metrics")).text)
    app.state.storage.dispose()

asyncio.run(main())
"""


def test_http_metrics_count_requests_by_route_and_status_class(tmp_path: Path) -> None:
    """In a process of its own, as a server runs one app per process: the instrumentator records
    only the first app a process builds, and the test process builds many."""
    result = subprocess.run([sys.executable, "-c", HTTP_METRICS_SCRIPT, f"sqlite:///{tmp_path / 'http.db'}"],
                            capture_output=True, text=True, timeout=120, check=False, cwd=REPO)
    assert result.returncode == 0, result.stderr
    samples = scrape(result.stdout)
    assert value(samples, "http_requests_total", handler="/v1/quotes", method="GET", status="2xx") == 2
    assert value(samples, "http_requests_total", handler="/v1/quotes/{quote_id}", method="GET", status="4xx") == 1
    assert value(samples, "http_request_duration_seconds_count", handler="/v1/quotes", method="GET") == 2
    handlers = {dict(labels).get("handler") for name, labels in samples if name == "http_requests_total"}
    assert handlers == {"/v1/quotes", "/v1/quotes/{quote_id}"}  # probes and /metrics are not counted


async def test_the_domain_counters_move(client: httpx.AsyncClient, owned_wins_request: dict[str, Any]) -> None:
    before = await metrics(client)

    created = await client.post("/v1/quotes", json=owned_wins_request, headers={"Idempotency-Key": "k-1"})
    assert created.status_code == 201, created.text
    replayed = await client.post("/v1/quotes", json=owned_wins_request, headers={"Idempotency-Key": "k-1"})
    assert replayed.headers["berth-replayed"] == "true"  # a replay stores nothing and is not counted
    sweep = await client.post("/v1/sweeps", json=small_grid())
    assert sweep.status_code == 201, sweep.text
    plan = await client.post("/v1/fleet-plans", json=plan_request())
    assert plan.status_code == 201, plan.text
    problem_of(await client.get("/v1/quotes/q_missing"), 404)
    problem_of(await client.post("/v1/quotes", json={}), 422)

    after = await metrics(client)

    def moved(name: str, **labels: str) -> float:
        return value(after, name, **labels) - value(before, name, **labels)

    assert moved("berth_quotes_created_total") == 1
    assert moved("berth_quote_seconds_count") == 1
    assert moved("berth_quote_seconds_sum") > 0
    assert moved("berth_sweep_scenarios_total") == 12
    assert moved("berth_fleet_plans_total") == 1
    assert moved("berth_errors_total", type="not-found") == 1
    assert moved("berth_errors_total", type="invalid-input") == 1


async def test_a_background_sweep_counts_its_scenarios_when_it_has_run(make_client: Callable[..., Any]) -> None:
    async with make_client(sweep_answer_at_once=100) as (_app, client):
        before = value(await metrics(client), "berth_sweep_scenarios_total")
        accepted = await client.post("/v1/sweeps", json=monte_carlo(500))
        assert accepted.status_code == 202, accepted.text
        deadline = time.monotonic() + 120
        status = ""
        while time.monotonic() < deadline and status not in ("done", "failed"):
            await asyncio.sleep(0.05)
            status = (await client.get(accepted.headers["location"])).json()["status"]
        assert status == "done"
        assert value(await metrics(client), "berth_sweep_scenarios_total") - before == 500


# Logs.

async def test_each_request_logs_one_json_line(client: httpx.AsyncClient, json_log: io.StringIO) -> None:
    await client.get("/v1/quotes/q_missing", headers={"X-Request-ID": "log-1"})
    generated = (await client.post("/v1/quotes", json={"campaign": {}})).headers["x-request-id"]
    lines = [json.loads(line) for line in json_log.getvalue().splitlines()]
    assert len(lines) == 2
    first, second = lines
    assert first["request_id"] == "log-1"
    assert (first["method"], first["path"], first["status"]) == ("GET", "/v1/quotes/q_missing", 404)
    assert second["request_id"] == generated
    assert (second["method"], second["path"], second["status"]) == ("POST", "/v1/quotes", 422)
    for line in lines:
        assert line["logger"] == "berth.http" and line["level"] == "info"
        assert isinstance(line["duration_ms"], float | int) and line["duration_ms"] >= 0
