"""End to end on PostgreSQL: two `berth serve` replicas (two processes, two ports) on one database.

They start together on an empty database (the migrations take turns on an advisory lock; the demo
catalog is stored once); quotes posted by clients spread over both are all created once, under
distinct ids, and every acknowledged quote reads back, byte for byte, from either replica; one
Idempotency-Key sent to both at once stores one quote and one id, and another body under that key is
refused by both; a replica killed mid-burst loses nothing it acknowledged, while the other answers on.

Skipped unless BERTH_TEST_DATABASE_URL names a PostgreSQL server (.ci/run sets it): two replicas must
never share a SQLite file."""

import asyncio
import copy
import signal
import uuid
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any

import httpx
import pytest

from tests.databases import fresh_postgresql_database, needs_postgresql, postgresql_server
from tests.e2e.conftest import BerthServer, ServerFactory
from tests.e2e.test_server import (
    REQUEST_TIMEOUT_S,
    Reply,
    assert_all_readable,
    campaign,
    list_all,
    post_until_answered,
)

pytestmark = [pytest.mark.e2e, needs_postgresql]

CLIENTS = 20
QUOTES = 200
IDEMPOTENCY_ROUNDS = 5
CLIENTS_PER_REPLICA = 4
BURST = 80
KILL_AFTER = 12  # 201s from the victim before it is killed


@pytest.fixture
def shared_database() -> Iterator[str]:
    server = postgresql_server()
    assert server is not None
    with fresh_postgresql_database(server) as url:
        yield url


@pytest.fixture
def replicas(shared_database: str, tmp_path: Path) -> Iterator[tuple[BerthServer, BerthServer]]:
    """Two servers on the one database, started at the same moment on an empty schema."""
    logs = tmp_path / "replica-logs"
    logs.mkdir()
    servers = (BerthServer(shared_database, logs, "replica-a"), BerthServer(shared_database, logs, "replica-b"))
    try:
        with ThreadPoolExecutor(max_workers=2) as pool:
            list(pool.map(BerthServer.start, servers))  # re-raises a start that failed
        yield servers
    finally:
        for server in servers:
            server.stop()


async def post_spread(urls: list[str], bodies: list[dict[str, Any]], *, clients: int = CLIENTS,
                      on_reply: Any = None) -> list[tuple[int, Reply | Exception]]:
    """POST every body to /v1/quotes from `clients` concurrent clients, client k talking to
    urls[k % len(urls)]; each body's (replica index, reply or transport error)."""
    results: list[tuple[int, Reply | Exception] | None] = [None] * len(bodies)
    work = iter(enumerate(bodies))

    async def client_loop(replica: int) -> None:
        async with httpx.AsyncClient(base_url=urls[replica], timeout=REQUEST_TIMEOUT_S) as client:
            for index, body in work:
                try:
                    response = await client.post("/v1/quotes", json=body)
                except httpx.TransportError as error:
                    results[index] = (replica, error)
                    continue
                reply = Reply(response.status_code, response.headers, response.content)
                results[index] = (replica, reply)
                if on_reply is not None:
                    on_reply(replica, reply)

    await asyncio.gather(*(client_loop(k % len(urls)) for k in range(clients)))
    done = [r for r in results if r is not None]
    assert len(done) == len(bodies)
    return done


def catalog_ids(server: BerthServer) -> list[str]:
    with httpx.Client(base_url=server.url, timeout=REQUEST_TIMEOUT_S) as client:
        page = client.get("/v1/catalogs")
    assert page.status_code == 200, page.text
    return [item["id"] for item in page.json()["items"]]


def all_ids(server: BerthServer, **filters: str) -> list[str]:
    with httpx.Client(base_url=server.url, timeout=REQUEST_TIMEOUT_S) as client:
        return [item["id"] for item in list_all(client, **filters)]


def test_two_replicas_starting_together_migrate_once_and_store_one_demo_catalog(
    replicas: tuple[BerthServer, BerthServer],
) -> None:
    first, second = replicas
    assert first.port != second.port
    with httpx.Client(timeout=REQUEST_TIMEOUT_S) as client:
        for server in replicas:
            assert client.get(f"{server.url}/readyz").status_code == 200, server.stderr()
    assert len(catalog_ids(first)) == 1
    assert catalog_ids(first) == catalog_ids(second)


def test_quotes_spread_over_two_replicas_are_all_stored_once_and_readable_from_both(
    replicas: tuple[BerthServer, BerthServer],
) -> None:
    bodies = [campaign(i, "replicas") for i in range(QUOTES)]
    results = asyncio.run(post_spread([server.url for server in replicas], bodies))

    failures = [(i, reply if isinstance(reply, Exception) else (reply.status, reply.content[:200]))
                for i, (_, reply) in enumerate(results) if not isinstance(reply, Reply) or reply.status != 201]
    assert failures == [], (f"{len(failures)} of {QUOTES} failed; first: {failures[:3]}\n"
                            f"{replicas[0].stderr()}\n{replicas[1].stderr()}")
    replies = [reply for _, reply in results if isinstance(reply, Reply)]
    documents = [reply.json() for reply in replies]
    ids = [document["id"] for document in documents]
    assert len(set(ids)) == QUOTES, "two quotes share an id"
    assert [d["request"]["campaign"]["name"] for d in documents] == [b["campaign"]["name"] for b in bodies]
    served = [sum(1 for replica, _ in results if replica == index) for index in (0, 1)]
    assert min(served) > 0 and sum(served) == QUOTES, served

    acknowledged = {document["id"]: reply.content for document, reply in zip(documents, replies, strict=True)}
    for server in replicas:  # what either replica acknowledged, each reads back unchanged
        assert_all_readable(server, acknowledged)
        listed = all_ids(server)
        assert len(listed) == QUOTES
        assert set(listed) == set(ids)


def test_one_idempotency_key_sent_to_both_replicas_at_once_stores_one_quote(
    replicas: tuple[BerthServer, BerthServer],
) -> None:
    first, second = replicas
    before = len(all_ids(first))
    for round_ in range(IDEMPOTENCY_ROUNDS):
        body = campaign(round_, "idem-replicas")
        key = f"e2e-replicas-{uuid.uuid4().hex}"

        async def both(body: dict[str, Any] = body, key: str = key) -> list[tuple[Reply, int]]:
            answers = await asyncio.gather(post_until_answered(first.url, body, key, CLIENTS_PER_REPLICA),
                                           post_until_answered(second.url, body, key, CLIENTS_PER_REPLICA))
            return [answer for group in answers for answer in group]

        replies = [reply for reply, _ in asyncio.run(both())]
        assert [r.status for r in replies] == [201] * (2 * CLIENTS_PER_REPLICA), [r.content[:200] for r in replies]
        assert len({r.json()["id"] for r in replies}) == 1, f"round {round_}: one key gave several quotes"
        assert len({r.content for r in replies}) == 1
        originals = [r for r in replies if r.headers.get("berth-replayed") != "true"]
        assert len(originals) == 1, f"round {round_}: {len(originals)} originals; exactly one was expected"
        quote_id = replies[0].json()["id"]
        for server in replicas:
            assert all_ids(server, campaign_name=body["campaign"]["name"]) == [quote_id]

        other = copy.deepcopy(body)
        other["campaign"]["work"]["tokens"] *= 2
        with httpx.Client(timeout=REQUEST_TIMEOUT_S) as client:
            for server in replicas:
                refused = client.post(f"{server.url}/v1/quotes", json=other, headers={"Idempotency-Key": key})
                assert refused.status_code == 422, refused.text
                assert refused.headers["content-type"].startswith("application/problem+json")
                assert "Idempotency-Key" in refused.json()["detail"]
                again = client.post(f"{server.url}/v1/quotes", json=body, headers={"Idempotency-Key": key})
                assert again.status_code == 201 and again.headers.get("berth-replayed") == "true"
                assert again.content == replies[0].content
    for server in replicas:
        assert len(all_ids(server)) == before + IDEMPOTENCY_ROUNDS


def test_a_replica_killed_mid_burst_loses_nothing_it_acknowledged_and_the_other_answers_on(
    replicas: tuple[BerthServer, BerthServer], berth_factory: ServerFactory, shared_database: str,
) -> None:
    victim, survivor = replicas
    from_victim = 0

    def kill_after_enough(replica: int, reply: Reply) -> None:
        nonlocal from_victim
        if replica == 0 and reply.status == 201:
            from_victim += 1
            if from_victim == KILL_AFTER:
                victim.kill()

    bodies = [campaign(i, "replica-kill") for i in range(BURST)]
    results = asyncio.run(post_spread([victim.url, survivor.url], bodies, on_reply=kill_after_enough))
    assert victim.process is not None and victim.process.returncode == -signal.SIGKILL

    answered = [(replica, reply) for replica, reply in results if isinstance(reply, Reply)]
    assert [reply.status for _, reply in answered if reply.status != 201] == []
    assert all(isinstance(reply, Reply) for replica, reply in results if replica == 1), "the survivor failed"
    assert any(isinstance(reply, Exception) for replica, reply in results if replica == 0), \
        "the kill came after the victim's share of the burst had finished"
    acknowledged = {reply.json()["id"]: reply.content for _, reply in answered}
    assert sum(1 for replica, _ in answered if replica == 0) >= KILL_AFTER

    assert_all_readable(survivor, acknowledged)
    restarted = berth_factory(shared_database)
    assert_all_readable(restarted, acknowledged)
    stored = set(all_ids(restarted))
    assert set(acknowledged) <= stored
    assert len(stored) <= BURST
