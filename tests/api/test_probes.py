"""Probes answer without touching anything external; a started server settles its heap."""

import gc
from pathlib import Path

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


@pytest.mark.anyio
async def test_a_started_server_leaves_what_it_holds_out_of_later_collections(tmp_path: Path) -> None:
    """The lifespan freezes the objects start-up leaves alive (`settle_heap`), so that no full garbage
    collection walks them again mid-request; garbage made at start-up is collected first, not frozen."""
    app = create_app(Settings(database_url=f"sqlite:///{tmp_path / 'berth.db'}", load_demo_catalog=True))
    held_before = len(gc.get_objects())
    try:
        async with app.router.lifespan_context(app):
            frozen, unfrozen = gc.get_freeze_count(), len(gc.get_objects())
    finally:
        gc.unfreeze()  # the test process's own heap back as it was
    assert frozen >= held_before // 2  # the process's objects, the app's and the catalog's among them
    assert unfrozen < frozen // 10  # what collections still look at: what was made after the start
