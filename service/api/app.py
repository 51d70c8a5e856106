"""The app factory: nothing is built at import; `create_app(settings)` wires everything, and the
lifespan (or `prepare` in tests) migrates the schema and loads the demo catalog."""

import gc
import logging
from collections.abc import AsyncIterator, Callable
from contextlib import asynccontextmanager
from datetime import datetime
from typing import Any

from anyio import CapacityLimiter
from fastapi import FastAPI
from fastapi.openapi.utils import get_openapi
from starlette.middleware.gzip import GZipMiddleware
from uvicorn.middleware.proxy_headers import ProxyHeadersMiddleware

from service import __version__
from service.api import problems
from service.api.auth import KeylessOnNetwork, LocalMode, RateLimiter, is_loopback_host
from service.api.deps import ComputeLane, utc_now
from service.api.docs import install_docs
from service.api.examples import quote_request_examples
from service.api.manners import KnownQueryOnly
from service.api.middleware import BodyLimit, HeadAsGet, RequestContext, SocketPeer, TimeLimit
from service.api.observability import install_metrics
from service.api.routers import catalogs, fleet_plans, probes, quotes, sweeps
from service.config import Settings
from service.contract.answers import Problem
from service.contract.catalog import CatalogIn
from service.storage.engine import build_engine
from service.storage.migrate import upgrade
from service.storage.repository import Storage
from service.usecases.catalogs import ParsedCatalogs, load_demo_catalog
from service.usecases.idempotency import release_dead_claims
from service.usecases.stored_sweeps import RunnerTiming, SweepRunner

log = logging.getLogger("berth")
GZIP_FROM_BYTES = 1024  # smaller answers gain little and cost a compression each

DESCRIPTION = """Where a machine-learning training campaign should run, and what it will cost.

Estimates are for planning, not vendor quotes. Power, cooling and electrical figures must be confirmed
by licensed engineers under local codes. A residency result is a screen against the rules entered with
the request, not legal advice.

Every POST that creates takes an `Idempotency-Key` header: the same key and body answer the first answer
again, marked by the reply header `Berth-Replayed: true` (absent on a first answer). Quote answers take
`?view=summary` for a lean shape; answers over 1 KB are gzipped when the client accepts it."""


def prepare(app: FastAPI) -> None:
    """Bring the schema to head and, on an empty database, load the demo catalog."""
    settings: Settings = app.state.settings
    storage: Storage = app.state.storage
    if settings.migrate_on_start:
        upgrade(storage.engine)
    if settings.load_demo_catalog and settings.demo_catalog.exists():
        loaded = load_demo_catalog(storage, settings.demo_catalog, now=app.state.clock())
        if loaded is not None:
            log.info("loaded the demo catalog %s as %s", loaded["name"], loaded["id"])
    if app.state.local_mode.active():
        if not is_loopback_host(settings.host) and not settings.allow_keyless_on_network:
            raise KeylessOnNetwork(
                f"no API keys are configured and berth would listen on {settings.host}: issue keys first "
                "(`berth keys add --role ROLE --team TEAM`), listen on 127.0.0.1, or set "
                "BERTH_ALLOW_KEYLESS_ON_NETWORK=true (local mode still answers loopback callers only)")
        log.warning("local mode: no API keys are configured, so berth answers loopback callers only; "
                    "issue keys with `berth keys add --role ROLE --team TEAM`")
    released = release_dead_claims(storage)
    if released:
        log.info("released %d Idempotency-Key claims of processes that are gone", released)
    resumed = app.state.sweeps.resume()
    if resumed:
        log.info("%d unfinished sweeps to take up", resumed)


def settle_heap() -> None:
    """Leave the objects a started server holds (its modules, the app, the demo catalog: some 200,000)
    out of every later garbage collection; only what requests make is looked at again. Without this, a
    full collection walked them all every few hundred quotes and stopped the worker for about 90 ms,
    with every request in flight waiting: measured on 2 workers at 20 clients, quote p99 300-340 ms
    without, 214-289 ms with, and 4% less server CPU per quote (bench_quotes.py's load)."""
    gc.collect()  # what start-up left behind goes now, not frozen with the rest
    gc.freeze()


def create_app(settings: Settings | None = None, *, clock: Callable[[], datetime] = utc_now) -> FastAPI:
    settings = settings or Settings()

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        prepare(app)
        settle_heap()
        yield
        app.state.sweeps.shutdown()
        app.state.storage.dispose()

    app = FastAPI(title="berth", version=__version__, description=DESCRIPTION, lifespan=lifespan,
                  docs_url=None, redoc_url=None)
    app.state.settings = settings
    app.state.storage = Storage(build_engine(settings.database_url, file_mode=int(settings.sqlite_file_mode, 8)),
                                max_document_bytes=settings.max_document_bytes)
    app.state.catalogs = ParsedCatalogs()
    app.state.clock = clock
    app.state.compute_lane = ComputeLane(waiting=settings.compute_queue_max)
    app.state.probe_lane = CapacityLimiter(2)  # /readyz never queues behind requests for a thread
    app.state.local_mode = LocalMode(app.state.storage)
    app.state.rate_limiter = RateLimiter(per_second=settings.rate_limit_per_second, burst=settings.rate_limit_burst)
    app.state.failure_limiter = RateLimiter(per_second=settings.auth_failures_per_minute / 60.0,
                                            burst=settings.auth_failure_burst, remember=settings.auth_failure_addresses)
    problems.install(app)
    install_metrics(app)
    app.state.sweeps = SweepRunner(app.state.storage, app.state.catalogs, clock,
                                   count_scenarios=app.state.metrics.sweep_scenarios.inc,
                                   timing=RunnerTiming(heartbeat_seconds=settings.sweep_heartbeat_seconds,
                                                       stale_after_seconds=settings.sweep_stale_after_seconds))
    # Outermost first: every response carries a request id, then time and size limits apply, HEAD
    # becomes GET, and innermost answers over 1 KB are gzipped for clients that accept it (inside
    # HEAD, so a HEAD gets the same Content-Encoding and Content-Length as its GET).
    app.add_middleware(GZipMiddleware, minimum_size=GZIP_FROM_BYTES)
    app.add_middleware(HeadAsGet)
    app.add_middleware(BodyLimit, limit=settings.max_body_bytes)
    app.add_middleware(TimeLimit, seconds=settings.request_timeout_seconds)
    app.add_middleware(RequestContext)
    # Outside those (added last, so they run first): the socket's own peer kept for local mode, which
    # never believes a header, then the client's address from a trusted proxy's X-Forwarded-For.
    app.add_middleware(ProxyHeadersMiddleware, trusted_hosts=settings.forwarded_allow_ips)
    app.add_middleware(SocketPeer)
    app.include_router(probes.router)
    install_docs(app)
    for router in (catalogs.router, quotes.router, sweeps.router, fleet_plans.router):
        app.include_router(router, responses=problems.ACCESS_RESPONSES, dependencies=[KnownQueryOnly])
    app.openapi = lambda: _openapi(app)  # type: ignore[method-assign]
    return app


def _openapi(app: FastAPI) -> dict[str, Any]:
    """The generated schema, plus what FastAPI cannot infer: the catalog body (read raw, as JSON or
    YAML), the problem schema, and examples from the demo scenario."""
    if app.openapi_schema:
        return app.openapi_schema
    schema = get_openapi(title=app.title, version=app.version, description=app.description, routes=app.routes)
    components = schema.setdefault("components", {}).setdefault("schemas", {})
    for model in (CatalogIn, Problem):
        model_schema = model.model_json_schema(ref_template="#/components/schemas/{model}")
        components.update(model_schema.pop("$defs", {}))
        components[model.__name__] = model_schema
    body = schema["paths"]["/v1/quotes"]["post"]["requestBody"]["content"]["application/json"]
    settings: Settings = app.state.settings
    body["examples"] = quote_request_examples(settings.demo_catalog.parent)
    app.openapi_schema = schema
    return schema
