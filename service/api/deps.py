"""Dependencies, as Annotated aliases: the storage, the parsed-catalog cache, the clock (or the moment
of the request), the caller, the compute lane.

They are `async` because they only read app state: FastAPI runs a sync dependency on the thread pool,
a hop per dependency per request that costs more than the work."""

from collections.abc import Callable
from datetime import UTC, datetime
from typing import Annotated, TypeVar

from anyio import CapacityLimiter, to_thread
from fastapi import Depends, Header, Path, Query, Request

from service.config import Settings
from service.errors import Unavailable
from service.storage.repository import CURSOR_PATTERN, Storage
from service.usecases.catalogs import ParsedCatalogs

Result = TypeVar("Result")


async def _storage(request: Request) -> Storage:
    storage: Storage = request.app.state.storage
    return storage


async def _catalogs(request: Request) -> ParsedCatalogs:
    catalogs: ParsedCatalogs = request.app.state.catalogs
    return catalogs


async def _settings(request: Request) -> Settings:
    settings: Settings = request.app.state.settings
    return settings


async def _clock(request: Request) -> Callable[[], datetime]:
    clock: Callable[[], datetime] = request.app.state.clock
    return clock


async def _now(request: Request) -> datetime:
    clock: Callable[[], datetime] = request.app.state.clock
    return clock()


async def _raw_body(request: Request) -> bytes:
    return await request.body()


# Quotes are numpy work that holds the GIL between small array operations. Run twenty at once on
# twenty threads and they finish no sooner than one after another, but hand the GIL back and forth
# about a thousand times per quote and spend ~1.6x the CPU doing it (measured in-process: 0.4 ms of
# system time per quote alone, 7-8 ms at twenty). So each process computes quotes, sweeps answered at
# once and fleet plans on one worker thread at a time; the others wait on the event loop, first come
# first served, where a time limit can still refuse them. More throughput comes from more processes
# (`berth serve --workers`). The lane also bounds memory: one computation's arrays at a time, and at
# most `waiting` requests queued for it; beyond, a 503 with Retry-After.
COMPUTE_THREADS = 1


class ComputeLane:
    def __init__(self, *, waiting: int) -> None:
        self.limiter = CapacityLimiter(COMPUTE_THREADS)
        self.most_waiting = waiting
        self._waiting = 0  # only touched on the event loop

    async def run(self, work: Callable[[], Result]) -> Result:
        """`work` on the lane's thread, once its turn comes; refused at once when the queue is full."""
        if self._waiting >= self.most_waiting:
            raise Unavailable(f"{self._waiting} computations are already waiting; retry shortly",
                              retry_after_seconds=2)
        self._waiting += 1
        try:
            return await to_thread.run_sync(work, limiter=self.limiter)
        finally:
            self._waiting -= 1


async def _compute_lane(request: Request) -> ComputeLane:
    lane: ComputeLane = request.app.state.compute_lane
    return lane


StorageDep = Annotated[Storage, Depends(_storage)]
CatalogsDep = Annotated[ParsedCatalogs, Depends(_catalogs)]
NowDep = Annotated[datetime, Depends(_now)]
ClockDep = Annotated[Callable[[], datetime], Depends(_clock)]
# Every POST that creates takes one (conventions.md); `once_per_key` gives it its meaning.
IdempotencyKeyDep = Annotated[str | None, Header(alias="Idempotency-Key", max_length=255)]
SettingsDep = Annotated[Settings, Depends(_settings)]
RawBodyDep = Annotated[bytes, Depends(_raw_body)]
ComputeLaneDep = Annotated[ComputeLane, Depends(_compute_lane)]


def utc_now() -> datetime:
    return datetime.now(UTC)


# Ids in paths and cursors in queries have the form this service issues (`new_id`, `encode_cursor`);
# anything else is refused with a 422 naming the parameter before it reaches the database (a NUL, say,
# which PostgreSQL cannot even compare).
def _id_path(prefix: str, what: str) -> object:
    return Path(pattern=rf"^{prefix}_[A-Za-z0-9]{{1,64}}$", max_length=80, description=f"the {what}'s id")


CatalogIdPath = Annotated[str, _id_path("cat", "catalog")]
QuoteIdPath = Annotated[str, _id_path("q", "quote")]
SweepIdPath = Annotated[str, _id_path("sw", "sweep")]
PlanIdPath = Annotated[str, _id_path("fp", "fleet plan")]
CursorQuery = Annotated[str | None, Query(pattern=CURSOR_PATTERN, max_length=100,
                                          description="the next_cursor of the previous page, unchanged")]
PRINTABLE = r"^[^\x00-\x1f\x7f]+$"  # no control characters (NUL included)
