"""End to end: real `berth serve` processes on loopback, real HTTP clients, a real SQLite file.

Concurrent quotes are stored, listed and survive a restart; an Idempotency-Key stores one quote
however often and however concurrently it is retried; quotes acknowledged with 201 survive a SIGKILL
in the middle of a burst, and the file passes PRAGMA integrity_check; the server parses HTTP with
httptools on uvloop; the finance script prints the recommended option."""

import asyncio
import copy
import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
import uuid
from collections.abc import Callable
from contextlib import closing
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any

import httpx
import pytest

from tests.conftest import EXAMPLES, load_example
from tests.e2e.conftest import BerthServer, ServerFactory

pytestmark = pytest.mark.e2e

CLIENTS = 20
QUOTES = 200
KILL_ROUNDS = int(os.environ.get("BERTH_KILL_ROUNDS", "3"))  # .ci/run asks for 10
BURST = 80  # quotes posted per kill round
KILL_AFTER = 12  # the server is killed when this many 201s have arrived
REQUEST_TIMEOUT_S = 30.0
PAGE_LIMIT = 37  # not a divisor of the counts, so the last page is partial
MAX_PAGES = 100
DEMOS = sorted(p.name for p in EXAMPLES.glob("campaign-*.json"))


@dataclass(frozen=True)
class Reply:
    status: int
    headers: httpx.Headers
    content: bytes

    def json(self) -> Any:
        return json.loads(self.content)


def campaign(index: int, tag: str) -> dict[str, Any]:
    """A demo campaign with a name of its own, so every quote of a run is distinct."""
    body = load_example(DEMOS[index % len(DEMOS)])
    body["campaign"]["name"] = f"{body['campaign']['name']}-{tag}-{index:04d}"
    return body


async def post_all(url: str, bodies: list[dict[str, Any]], *, clients: int = CLIENTS,
                   on_reply: Callable[[Reply], None] | None = None) -> list[Reply | Exception]:
    """POST every body to /v1/quotes from `clients` concurrent clients; a reply or the transport error."""
    results: list[Reply | Exception | None] = [None] * len(bodies)
    work = iter(enumerate(bodies))

    async def client_loop() -> None:
        async with httpx.AsyncClient(base_url=url, timeout=REQUEST_TIMEOUT_S) as client:
            for index, body in work:
                try:
                    response = await client.post("/v1/quotes", json=body)
                except httpx.TransportError as error:
                    results[index] = error
                    continue
                reply = Reply(response.status_code, response.headers, response.content)
                results[index] = reply
                if on_reply is not None:
                    on_reply(reply)

    await asyncio.gather(*(client_loop() for _ in range(clients)))
    assert all(r is not None for r in results)
    return [r for r in results if r is not None]


def list_all(client: httpx.Client, **filters: str) -> list[dict[str, Any]]:
    """Every listed quote summary, page by page through the cursor."""
    items: list[dict[str, Any]] = []
    cursor: str | None = None
    for _ in range(MAX_PAGES):
        params = {"limit": str(PAGE_LIMIT), **filters, **({"cursor": cursor} if cursor else {})}
        page = client.get("/v1/quotes", params=params)
        assert page.status_code == 200, page.text
        items += page.json()["items"]
        cursor = page.json()["next_cursor"]
        if cursor is None:
            return items
    pytest.fail(f"GET /v1/quotes still had a next_cursor after {MAX_PAGES} pages")


def integrity(database: Path) -> str:
    with closing(sqlite3.connect(database, timeout=10.0)) as db:
        return str(db.execute("PRAGMA integrity_check").fetchone()[0])


def stored_rows(database: Path) -> int:
    with closing(sqlite3.connect(database, timeout=10.0)) as db:
        return int(db.execute("SELECT count(*) FROM quote").fetchone()[0])


def assert_all_readable(server: BerthServer, expected: dict[str, bytes]) -> None:
    """GET each quote by id: 200, and the very bytes the POST answered."""
    with httpx.Client(base_url=server.url, timeout=REQUEST_TIMEOUT_S) as client:
        for quote_id, content in expected.items():
            response = client.get(f"/v1/quotes/{quote_id}")
            assert response.status_code == 200, f"{quote_id}: {response.status_code} {response.text[:300]}"
            assert response.content == content, f"{quote_id} reads back differently from its 201"


def test_concurrent_quotes_are_stored_listed_and_survive_a_restart(berth_factory: ServerFactory,
                                                                   database: Path) -> None:
    server = berth_factory(database)
    bodies = [campaign(i, "load") for i in range(QUOTES)]
    replies = asyncio.run(post_all(server.url, bodies))

    failures = [(i, r if isinstance(r, Exception) else (r.status, r.content[:200]))
                for i, r in enumerate(replies) if not isinstance(r, Reply) or r.status != 201]
    assert failures == [], f"{len(failures)} of {QUOTES} failed; first: {failures[:3]}\n{server.stderr()}"
    created = [r for r in replies if isinstance(r, Reply)]
    documents = [r.json() for r in created]
    ids = [d["id"] for d in documents]
    assert len(set(ids)) == QUOTES
    assert [d["request"]["campaign"]["name"] for d in documents] == [b["campaign"]["name"] for b in bodies]
    assert all(r.headers["location"] == f"/v1/quotes/{d['id']}" for r, d in zip(created, documents, strict=True))

    with httpx.Client(base_url=server.url, timeout=REQUEST_TIMEOUT_S) as client:
        listed = list_all(client)
    assert len(listed) == QUOTES
    assert sorted(item["id"] for item in listed) == sorted(ids)
    moments = [datetime.fromisoformat(item["created_at"]) for item in listed]
    assert moments == sorted(moments, reverse=True), "the list is not newest first"

    server.stop()
    # uvicorn shuts down cleanly on SIGTERM, then re-raises the signal: -SIGTERM, never -SIGKILL
    assert server.process is not None and server.process.returncode in (0, -signal.SIGTERM), server.stderr()
    assert "Application shutdown complete" in server.stderr()
    restarted = berth_factory(database)
    assert_all_readable(restarted, {d["id"]: r.content for d, r in zip(documents, created, strict=True)})


def count(client: httpx.Client) -> int:
    return len(list_all(client))


def test_an_idempotency_key_replays_its_quote_and_refuses_another_body(berth: BerthServer) -> None:
    body = campaign(0, "idem-seq")
    key = {"Idempotency-Key": f"e2e-{uuid.uuid4().hex}"}
    with httpx.Client(base_url=berth.url, timeout=REQUEST_TIMEOUT_S) as client:
        before = count(client)
        first = client.post("/v1/quotes", json=body, headers=key)
        assert first.status_code == 201, first.text
        assert "berth-replayed" not in first.headers
        stored = count(client)
        assert stored == before + 1

        retries = [client.post("/v1/quotes", json=body, headers=key) for _ in range(4)]
        # the fingerprint is of the canonical JSON: other key order and spacing is the same body
        respaced = json.dumps(body, indent=3, sort_keys=True)
        retries.append(client.post("/v1/quotes", content=respaced,
                                   headers={**key, "Content-Type": "application/json"}))
        for retry in retries:
            assert retry.status_code == 201, retry.text
            assert retry.headers.get("berth-replayed") == "true"
            assert retry.content == first.content

        other = copy.deepcopy(body)
        other["campaign"]["work"]["tokens"] *= 2
        refused = client.post("/v1/quotes", json=other, headers=key)
        assert refused.status_code == 422
        assert refused.headers["content-type"].startswith("application/problem+json")
        problem = refused.json()
        assert problem["status"] == 422 and "Idempotency-Key" in problem["detail"]

        assert count(client) == stored
        named = list_all(client, campaign_name=body["campaign"]["name"])
        assert [item["id"] for item in named] == [first.json()["id"]]
        # the refused body did not disturb the key: it still replays the first answer
        again = client.post("/v1/quotes", json=body, headers=key)
        assert again.status_code == 201 and again.content == first.content


async def post_until_answered(url: str, body: dict[str, Any], key: str, clients: int) -> list[tuple[Reply, int]]:
    """Each client posts the same body and key, retrying a 409 (first still in flight) until it gets
    its answer; returns each client's final reply and how many 409s it saw."""
    deadline = time.monotonic() + REQUEST_TIMEOUT_S

    async def one_client() -> tuple[Reply, int]:
        conflicts = 0
        async with httpx.AsyncClient(base_url=url, timeout=REQUEST_TIMEOUT_S) as client:
            while time.monotonic() < deadline:
                response = await client.post("/v1/quotes", json=body, headers={"Idempotency-Key": key})
                if response.status_code != 409:
                    return Reply(response.status_code, response.headers, response.content), conflicts
                assert response.headers["content-type"].startswith("application/problem+json")
                conflicts += 1
                await asyncio.sleep(0.02)
        raise AssertionError(f"still 409 after {REQUEST_TIMEOUT_S:.0f} s of retries")

    return list(await asyncio.gather(*(one_client() for _ in range(clients))))


def test_concurrent_retries_of_one_key_store_exactly_one_quote(berth: BerthServer) -> None:
    body = campaign(1, "idem-par")
    key = f"e2e-{uuid.uuid4().hex}"
    with httpx.Client(base_url=berth.url, timeout=REQUEST_TIMEOUT_S) as client:
        before = count(client)
    answers = asyncio.run(post_until_answered(berth.url, body, key, clients=8))
    replies = [reply for reply, _ in answers]
    assert [r.status for r in replies] == [201] * 8, [r.content[:200] for r in replies]
    assert len({r.json()["id"] for r in replies}) == 1
    assert len({r.content for r in replies}) == 1
    originals = [r for r in replies if r.headers.get("berth-replayed") != "true"]
    assert len(originals) == 1, "exactly one client must get the original, the others replays"
    with httpx.Client(base_url=berth.url, timeout=REQUEST_TIMEOUT_S) as client:
        assert count(client) == before + 1
        sequential = client.post("/v1/quotes", json=body, headers={"Idempotency-Key": key})
        assert sequential.status_code == 201 and sequential.headers.get("berth-replayed") == "true"
        assert sequential.json()["id"] == replies[0].json()["id"]
        assert count(client) == before + 1


def test_acknowledged_quotes_survive_sigkill_mid_burst(berth_factory: ServerFactory, database: Path) -> None:
    acknowledged: dict[str, bytes] = {}
    server = berth_factory(database)
    for round_ in range(KILL_ROUNDS):
        created = 0

        def kill_after_enough(reply: Reply, victim: BerthServer = server) -> None:
            nonlocal created
            created += reply.status == 201
            if created == KILL_AFTER:
                victim.kill()

        bodies = [campaign(i, f"crash{round_}") for i in range(BURST)]
        replies = asyncio.run(post_all(server.url, bodies, on_reply=kill_after_enough))
        answered = [r for r in replies if isinstance(r, Reply)]
        assert [r.status for r in answered if r.status != 201] == []
        acked = {r.json()["id"]: r.content for r in answered if r.status == 201}
        unanswered = len(replies) - len(answered)
        assert len(acked) >= KILL_AFTER
        assert unanswered > 0, f"round {round_}: the kill came after the burst had finished"
        assert server.process is not None and server.process.returncode == -signal.SIGKILL
        acknowledged.update(acked)

        server = berth_factory(database)
        assert_all_readable(server, acknowledged)
        assert integrity(database) == "ok"
    server.stop()
    assert integrity(database) == "ok"
    assert len(acknowledged) <= stored_rows(database) <= KILL_ROUNDS * BURST


FINANCE_SCRIPT = EXAMPLES / "finance_script.py"


def run_finance_script(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, str(FINANCE_SCRIPT), *args], capture_output=True, text=True,
                          timeout=60, check=False)


@pytest.mark.skipif(not Path("/proc/self/maps").exists(), reason="reads the server's memory map from /proc")
def test_the_server_parses_http_with_httptools_on_uvloop(berth: BerthServer) -> None:
    mapped = Path(f"/proc/{berth.pid}/maps").read_text(encoding="utf-8")
    assert "httptools" in mapped, "berth serve fell back to the pure-Python HTTP parser"
    assert "uvloop" in mapped, "berth serve fell back to asyncio's own event loop"


def test_the_finance_script_prints_the_ranked_options_and_the_recommendation(berth: BerthServer) -> None:
    done = run_finance_script("--url", berth.url)
    assert done.returncode == 0, done.stderr
    with httpx.Client(base_url=berth.url, timeout=REQUEST_TIMEOUT_S) as client:
        newest = client.get("/v1/quotes", params={"limit": "1"}).json()["items"][0]
        quote = client.get(f"/v1/quotes/{newest['id']}").json()
    assert quote["request"]["campaign"]["name"] == load_example("campaign-owned-wins.json")["campaign"]["name"]
    recommendation = quote["recommendation"]
    lines = done.stdout.splitlines()
    assert f"Recommended: {recommendation['venue']}/{recommendation['term']}" in lines
    assert f"Why: {recommendation['why']}" in lines
    assert quote["id"] in done.stdout
    ranked = [o for o in quote["options"] if o["rank"] is not None]
    for option in ranked:  # every ranked option on a line with its rank and total
        row = next(line for line in lines if f" {option['venue']['id']}/{option['term']} " in line)
        assert row.split()[0] == str(option["rank"])
        assert f"{option['cost']['total']:,.2f} {quote['currency']}" in row
    assert sum("ruled out: " in line for line in lines) == len(quote["options"]) - len(ranked)
    notes = [f"Note: {caution}" for caution in quote["cautions"]]
    assert notes and lines[-len(notes):] == notes  # the cautions close the printout


def test_the_finance_script_says_when_nothing_is_feasible_and_when_refused(berth: BerthServer,
                                                                           tmp_path: Path) -> None:
    blocked = run_finance_script(str(EXAMPLES / "campaign-residency-blocked.json"), "--url", berth.url)
    assert blocked.returncode == 0, blocked.stderr
    assert "No option is feasible. Next steps:" in blocked.stdout
    assert "Recommended:" not in blocked.stdout

    invalid = tmp_path / "invalid.json"
    invalid.write_text(json.dumps({"campaign": {"name": "no-work-given", "team": "language"}}), encoding="utf-8")
    refused = run_finance_script(str(invalid), "--url", berth.url)
    assert refused.returncode == 1
    assert "berth refused the request (422" in refused.stderr
    assert "campaign.work" in refused.stderr


def test_a_server_of_two_workers_removes_its_metrics_directory_when_it_stops(tmp_path: Path, database: Path) -> None:
    """The workers share a metrics directory, made in the temporary directory when none is named:
    it lives as long as the server and goes with it."""
    scratch = tmp_path / "scratch"
    scratch.mkdir()
    server = BerthServer(database, tmp_path, "two-workers", env={"TMPDIR": str(scratch)}, workers=2)
    server.start()
    try:
        assert [path.name.startswith("berth-metrics-") for path in scratch.iterdir()] == [True]
        assert httpx.get(f"{server.url}/healthz", timeout=5.0).status_code == 200
    finally:
        server.stop()
    assert server.process is not None and server.process.returncode == 0
    assert list(scratch.iterdir()) == []
