"""The app on a database of its own, prepared (migrated, demo catalog loaded), with a clock the
tests move by hand, and an httpx client talking to it in-process. The database is a temporary SQLite
file, or a fresh PostgreSQL database when BERTH_TEST_DATABASE_URL is set (see tests/databases.py)."""

import io
import logging
from collections.abc import AsyncIterator, Callable, Iterator
from contextlib import asynccontextmanager
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import httpx
import pytest
from fastapi import FastAPI

from service.api.app import create_app, prepare
from service.api.observability import JsonFormatter
from service.config import Settings
from service.storage.repository import Storage
from tests.databases import database_for_test

START = datetime(2027, 1, 4, 9, 0, tzinfo=UTC)


class FakeClock:
    """Stands still until told to move, so ordering and leases are tested without sleeping."""

    def __init__(self, start: datetime = START) -> None:
        self.now = start

    def __call__(self) -> datetime:
        return self.now

    def advance(self, **delta: float) -> datetime:
        self.now += timedelta(**delta)
        return self.now


@pytest.fixture
def clock() -> FakeClock:
    return FakeClock()


@pytest.fixture
def database_url(tmp_path: Path) -> Iterator[str]:
    with database_for_test(tmp_path) as url:
        yield url


@pytest.fixture
def settings(database_url: str) -> Settings:
    return Settings(database_url=database_url, load_demo_catalog=True)


@pytest.fixture
def app(settings: Settings, clock: FakeClock) -> Iterator[FastAPI]:
    application = create_app(settings, clock=clock)
    prepare(application)  # ASGITransport does not run the lifespan
    yield application
    application.state.sweeps.shutdown()
    application.state.storage.dispose()


@pytest.fixture
def storage(app: FastAPI) -> Storage:
    stored: Storage = app.state.storage
    return stored


@pytest.fixture
async def client(app: FastAPI) -> AsyncIterator[httpx.AsyncClient]:
    transport = httpx.ASGITransport(app=app)
    async with httpx.AsyncClient(transport=transport, base_url="http://berth.test") as http:
        yield http


@pytest.fixture
def make_client(database_url: str, clock: FakeClock) -> Callable[..., Any]:
    """An app with its own settings, prepared, and a client for it; the sweep runner stops after."""

    @asynccontextmanager
    async def open_client(**settings: Any) -> AsyncIterator[tuple[FastAPI, httpx.AsyncClient]]:
        app = create_app(Settings(database_url=database_url, **settings), clock=clock)
        prepare(app)
        try:
            async with httpx.AsyncClient(transport=httpx.ASGITransport(app=app), base_url="http://berth.test") as http:
                yield app, http
        finally:
            app.state.sweeps.shutdown()
            app.state.storage.dispose()

    return open_client


@pytest.fixture
def json_log(caplog: pytest.LogCaptureFixture) -> Iterator[io.StringIO]:
    """berth.http's records, formatted as they are emitted (the request id lives in a context var)."""
    caplog.set_level(logging.INFO, logger="berth.http")
    stream = io.StringIO()
    handler = logging.StreamHandler(stream)
    handler.setFormatter(JsonFormatter())
    logger = logging.getLogger("berth.http")
    logger.addHandler(handler)
    try:
        yield stream
    finally:
        logger.removeHandler(handler)
