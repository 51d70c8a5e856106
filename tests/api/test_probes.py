"""Probes answer without touching anything external."""

import anyio
import httpx
import pytest

from service.api.app import create_app
from service.config import Settings


@pytest.mark.anyio
async def test_healthz_answers_ok() -> None:
    app = create_app(Settings(database_url="sqlite://"))
    async with httpx.AsyncClient(transport=httpx.ASGITransport(app=app), base_url="http://test") as client:
        response = await client.get("/healthz")
    assert response.status_code == 200
    assert response.json() == {"status": "ok"}


@pytest.mark.anyio
async def test_healthz_answers_while_every_worker_thread_is_busy() -> None:
    """Liveness must not wait for the thread pool: when slow work holds every worker thread, a probe
    that queued behind it would time out and get a healthy process restarted."""
    app = create_app(Settings(database_url="sqlite://"))
    limiter = anyio.to_thread.current_default_thread_limiter()
    tokens = limiter.total_tokens
    limiter.total_tokens = 1
    await limiter.acquire()  # every worker thread is taken
    try:
        async with httpx.AsyncClient(transport=httpx.ASGITransport(app=app), base_url="http://test") as client:
            with anyio.fail_after(2.0):
                response = await client.get("/healthz")
        assert response.status_code == 200
    finally:
        limiter.release()
        limiter.total_tokens = tokens
