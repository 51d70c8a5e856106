"""A bounded soak (issue 18): two `berth serve` replicas on one PostgreSQL database take a fixed,
seeded mix of quotes, sweeps (answered at once and in the background), fleet plans, reads and bad
inputs from concurrent clients spread over both. No answer may be a 5xx, every acknowledged write must
read back from both replicas, background sweeps must finish, and each replica's peak RSS must stay
bounded. The figures are printed (`pytest -s`).

`BERTH_SOAK_REQUESTS` sets the number of requests (2,000 by default). Skipped unless
BERTH_TEST_DATABASE_URL names a PostgreSQL server (.ci/run sets it)."""

import os
import random
import threading
import time
import uuid
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import httpx
import pytest

from tests.conftest import load_example
from tests.databases import fresh_postgresql_database, needs_postgresql, postgresql_server
from tests.e2e.conftest import BerthServer
from tests.e2e.test_hardening import RSS_LIMIT, peak_rss_bytes

pytestmark = [pytest.mark.e2e, needs_postgresql]

REQUESTS = int(os.environ.get("BERTH_SOAK_REQUESTS", "2000"))
CLIENTS = 8
SEED = 18
SERVER_ENV = {"BERTH_SWEEP_ANSWER_AT_ONCE": "2000", "BERTH_SWEEP_HEARTBEAT_SECONDS": "1"}


@dataclass
class Tally:
    requests: int = 0
    by_status: dict[int, int] = field(default_factory=dict)
    server_errors: list[str] = field(default_factory=list)
    unexpected: list[str] = field(default_factory=list)
    created: dict[str, list[str]] = field(default_factory=lambda: {"quotes": [], "sweeps": [], "fleet-plans": []})
    lock: threading.Lock = field(default_factory=threading.Lock)

    def record(self, kind: str, response: httpx.Response, expected: set[int]) -> None:
        with self.lock:
            self.requests += 1
            self.by_status[response.status_code] = self.by_status.get(response.status_code, 0) + 1
            if response.status_code >= 500:
                self.server_errors.append(f"{kind}: {response.status_code} {response.text[:200]}")
            elif response.status_code not in expected:
                self.unexpected.append(f"{kind}: {response.status_code} {response.text[:200]}")


def quote_body(rng: random.Random, index: int) -> dict[str, Any]:
    body: dict[str, Any] = load_example(rng.choice(["campaign-owned-wins.json", "campaign-renting-wins.json",
                                                    "campaign-split.json", "campaign-recurring.json"]))
    body["campaign"]["name"] = f"soak-{index:05d}"
    body["overrides"] = {"electricity_price_per_kwh": round(rng.uniform(0.05, 0.3), 4)}
    return body


def bad_request(rng: random.Random, index: int) -> tuple[str, str, dict[str, Any]]:
    """(method, path, json or params) of an input the service must refuse with a 4xx."""
    quote = quote_body(rng, index)
    choices: list[tuple[str, str, dict[str, Any]]] = [
        ("POST", "/v1/quotes", {**quote, "campaign": {**quote["campaign"], "name": "nul\u0000name"}}),
        ("POST", "/v1/quotes", {**quote, "campaign": {**quote["campaign"], "runs": {"count": 2**63}}}),
        ("POST", "/v1/quotes", {**quote, "overrides": {"node_price_factor": 1e25}}),
        ("POST", "/v1/quotes", {**quote, "catalog_id": "cat_doesnotexist"}),
        ("POST", "/v1/fleet-plans", {**load_example("fleet-plan.json"),
                                     "candidate_nodes": {"min": 0, "max": 500_000, "step": 1}}),
        ("POST", "/v1/sweeps", {"base": quote, "grid": {"overrides.utilisation": [0.5, 7.0]}}),
        ("GET", "/v1/quotes", {"cursor": "not a cursor"}),
        ("GET", "/v1/quotes", {"created_from": "0001-01-01T00:00:00+23:59"}),
        ("GET", "/v1/quotes/q_a%00", {}),
        ("GET", f"/v1/sweeps/sw_{uuid.uuid4().hex}", {}),
    ]
    return rng.choice(choices)


def one_request(client: httpx.Client, rng: random.Random, index: int, tally: Tally) -> None:
    roll = rng.random()
    if roll < 0.50:
        headers = {"Idempotency-Key": f"soak-{index}"} if rng.random() < 0.3 else {}
        response = client.post("/v1/quotes", json=quote_body(rng, index), headers=headers)
        tally.record("quote", response, {201})
        if response.status_code == 201:
            tally.created["quotes"].append(response.json()["id"])
    elif roll < 0.60:
        sweep = {"base": quote_body(rng, index),
                 "grid": {"overrides.utilisation": [0.3, 0.4, 0.5], "campaign.runs.count": [1, 2, 4]}}
        response = client.post("/v1/sweeps", json=sweep)
        tally.record("sweep", response, {201})
        if response.status_code == 201:
            tally.created["sweeps"].append(response.json()["id"])
    elif roll < 0.62:
        sweep = load_example("sweep-electricity-and-utilisation.json")
        sweep["samples"], sweep["seed"] = 5_000, index
        response = client.post("/v1/sweeps", json=sweep)
        tally.record("background sweep", response, {202})
        if response.status_code == 202:
            tally.created["sweeps"].append(response.json()["id"])
    elif roll < 0.70:
        plan = load_example("fleet-plan.json")
        plan.update({"samples": 40, "horizon_months": 12, "seed": index})
        response = client.post("/v1/fleet-plans", json=plan)
        tally.record("fleet plan", response, {201})
        if response.status_code == 201:
            tally.created["fleet-plans"].append(response.json()["id"])
    elif roll < 0.85:
        method, path, payload = bad_request(rng, index)
        response = client.post(path, json=payload) if method == "POST" else client.get(path, params=payload)
        tally.record(f"bad {method} {path}", response, {404, 422})
    else:
        with tally.lock:
            known = list(tally.created["quotes"][-20:])
        if known and rng.random() < 0.5:
            quote_id = rng.choice(known)
            suffix = rng.choice(["", "/report", "/breakeven.svg", "/options.csv"])
            tally.record("read quote", client.get(f"/v1/quotes/{quote_id}{suffix}"), {200})
        else:
            tally.record("list quotes", client.get("/v1/quotes", params={"limit": 20}), {200})


@pytest.fixture
def replicas(tmp_path: Path) -> Iterator[tuple[BerthServer, BerthServer]]:
    server = postgresql_server()
    assert server is not None
    logs = tmp_path / "soak-logs"
    logs.mkdir()
    with fresh_postgresql_database(server) as url:
        servers = (BerthServer(url, logs, "soak-a", env=SERVER_ENV), BerthServer(url, logs, "soak-b", env=SERVER_ENV))
        try:
            with ThreadPoolExecutor(max_workers=2) as pool:
                list(pool.map(BerthServer.start, servers))
            yield servers
        finally:
            for replica in servers:
                replica.stop()


def test_a_bounded_soak_on_two_replicas_gives_no_5xx_loses_nothing_and_stays_bounded(
    replicas: tuple[BerthServer, BerthServer]
) -> None:
    tally = Tally()
    started = time.monotonic()

    def client_loop(k: int) -> None:
        rng = random.Random(SEED * 1000 + k)
        with httpx.Client(base_url=replicas[k % 2].url, timeout=120.0) as client:
            for index in range(k, REQUESTS, CLIENTS):
                one_request(client, rng, index, tally)

    with ThreadPoolExecutor(max_workers=CLIENTS) as pool:
        list(pool.map(client_loop, range(CLIENTS)))
    elapsed = time.monotonic() - started
    assert tally.requests == REQUESTS
    assert tally.server_errors == [], tally.server_errors[:5]
    assert tally.unexpected == [], tally.unexpected[:5]

    # Every acknowledged write reads back from both replicas; background sweeps finish.
    with httpx.Client(timeout=60.0) as client:
        for replica in replicas:
            for quote_id in tally.created["quotes"]:
                assert client.get(f"{replica.url}/v1/quotes/{quote_id}").status_code == 200, quote_id
            for plan_id in tally.created["fleet-plans"]:
                assert client.get(f"{replica.url}/v1/fleet-plans/{plan_id}").status_code == 200, plan_id
        deadline = time.monotonic() + 180.0
        for sweep_id in tally.created["sweeps"]:
            while True:
                status = client.get(f"{replicas[0].url}/v1/sweeps/{sweep_id}").json()["status"]
                if status == "done":
                    break
                assert status in ("queued", "running") and time.monotonic() < deadline, (sweep_id, status)
                time.sleep(0.5)
    peaks = [peak_rss_bytes(replica.pid) for replica in replicas]
    server_errors = sum(n for status, n in tally.by_status.items() if status >= 500)
    print(f"\nsoak: {tally.requests} requests in {elapsed:.0f} s over 2 replicas, {server_errors} 5xx, "
          f"statuses {dict(sorted(tally.by_status.items()))}, "
          f"{len(tally.created['quotes'])} quotes, {len(tally.created['sweeps'])} sweeps and "
          f"{len(tally.created['fleet-plans'])} fleet plans acknowledged and read back, "
          f"peak RSS {max(peaks) / 2**20:.0f} MiB")
    assert max(peaks) < RSS_LIMIT
