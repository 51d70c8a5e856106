"""Liveness and readiness: outside any auth and limits."""

from anyio import CapacityLimiter, to_thread
from fastapi import APIRouter, Request
from fastapi.responses import JSONResponse

from service.api.deps import StorageDep
from service.errors import StorageFull
from service.storage.migrate import is_at_head
from service.storage.repository import Storage
from service.usecases.liveness import this_process

router = APIRouter(tags=["probes"])


@router.get("/healthz")
async def healthz() -> dict[str, str]:
    """Liveness: the process answers. Checks nothing external, and runs on the event loop, so it
    answers even while slow work holds every worker thread."""
    return {"status": "ok"}


@router.get("/readyz", responses={503: {"description": "database unreachable, schema not at head, or storage full"}})
async def readyz(storage: StorageDep, request: Request) -> JSONResponse:
    """Readiness: the database answers, its schema is at the newest migration, and, after a write
    failed because the storage was full, writes succeed again. Checked on threads of its own, so it
    answers at once even while every worker thread is busy with requests."""
    lane: CapacityLimiter = request.app.state.probe_lane
    return await to_thread.run_sync(_readiness, storage, request, limiter=lane)


def _readiness(storage: Storage, request: Request) -> JSONResponse:
    checks: dict[str, str] = {}
    try:
        with storage.reading() as repository:
            repository.ping()
        checks["database"] = "ok"
        checks["migrations"] = "ok" if is_at_head(storage.engine) else "behind"
        if storage.full:  # a write failed for want of space: ready again once a small write commits
            checks["storage"] = "full" if not _writes_again(storage, request) else "ok"
    except Exception as error:  # any failure to reach the database means not ready
        checks["database"] = f"unreachable: {type(error).__name__}"
    ready = all(v == "ok" for v in checks.values()) and "migrations" in checks
    body: dict[str, object] = {"status": "ready" if ready else "not ready", "checks": checks}
    if ready:
        local = request.app.state.local_mode.active()
        body["access"] = ("local mode: no API keys are configured, so only loopback callers are answered"
                          if local else "API keys")
    return JSONResponse(body, status_code=200 if ready else 503)


def _writes_again(storage: Storage, request: Request) -> bool:
    try:
        with storage.writing() as repository:
            repository.write_probe(holder=this_process(), now=request.app.state.clock())
    except StorageFull:
        return False
    return True
