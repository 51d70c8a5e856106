"""Quotes are computed on one worker thread per process at a time (service/api/deps.py says why):
the others wait their turn on the event loop, and every one of them is answered and stored."""

import asyncio
import threading
import time
from typing import Any

import httpx
import pytest

import service.api.routers.quotes
from service.api.deps import COMPUTE_THREADS
from service.storage.repository import Storage


@pytest.mark.anyio
async def test_concurrent_quotes_are_computed_one_lane_at_a_time_and_all_stored(
    client: httpx.AsyncClient, storage: Storage, owned_wins_request: dict[str, Any],
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    running = most = 0
    lock = threading.Lock()
    create_quote = service.api.routers.quotes.create_quote

    def counting_create_quote(*args: Any, **kwargs: Any) -> Any:
        nonlocal running, most
        with lock:
            running += 1
            most = max(most, running)
        try:
            time.sleep(0.02)  # long enough for the other requests to arrive while this one computes
            return create_quote(*args, **kwargs)
        finally:
            with lock:
                running -= 1

    monkeypatch.setattr(service.api.routers.quotes, "create_quote", counting_create_quote)
    responses = await asyncio.gather(*(client.post("/v1/quotes", json=owned_wins_request) for _ in range(6)))

    assert [response.status_code for response in responses] == [201] * 6
    assert most == COMPUTE_THREADS
    with storage.reading() as repository:
        stored = {quote.id for quote in repository.quotes(limit=10, cursor=None)[0]}
    assert stored == {response.json()["id"] for response in responses}
