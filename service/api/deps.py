"""Dependencies, as Annotated aliases: the storage, the parsed-catalog cache, the clock, the caller.

They are `async` because they only read app state: FastAPI runs a sync dependency on the thread pool,
a hop per dependency per request that costs more than the work."""

from collections.abc import Callable
from datetime import UTC, datetime
from typing import Annotated

from fastapi import Depends, Request

from service.config import Settings
from service.storage.repository import Storage
from service.use_cases import ParsedCatalogs


async def _storage(request: Request) -> Storage:
    storage: Storage = request.app.state.storage
    return storage


async def _catalogs(request: Request) -> ParsedCatalogs:
    catalogs: ParsedCatalogs = request.app.state.catalogs
    return catalogs


async def _settings(request: Request) -> Settings:
    settings: Settings = request.app.state.settings
    return settings


async def _now(request: Request) -> datetime:
    clock: Callable[[], datetime] = request.app.state.clock
    return clock()


async def _raw_body(request: Request) -> bytes:
    return await request.body()


StorageDep = Annotated[Storage, Depends(_storage)]
CatalogsDep = Annotated[ParsedCatalogs, Depends(_catalogs)]
NowDep = Annotated[datetime, Depends(_now)]
SettingsDep = Annotated[Settings, Depends(_settings)]
RawBodyDep = Annotated[bytes, Depends(_raw_body)]


def utc_now() -> datetime:
    return datetime.now(UTC)
