"""Liveness and readiness: outside any auth and limits."""

from fastapi import APIRouter, Request
from fastapi.responses import JSONResponse

from service.api.deps import StorageDep
from service.storage.migrate import is_at_head

router = APIRouter(tags=["probes"])


@router.get("/healthz")
async def healthz() -> dict[str, str]:
    """Liveness: the process answers. Checks nothing external, and runs on the event loop, so it
    answers even while slow work holds every worker thread."""
    return {"status": "ok"}


@router.get("/readyz", responses={503: {"description": "database unreachable or schema not at head"}})
def readyz(storage: StorageDep, request: Request) -> JSONResponse:
    """Readiness: the database answers and its schema is at the newest migration."""
    checks: dict[str, str] = {}
    try:
        with storage.reading() as repository:
            repository.ping()
        checks["database"] = "ok"
        checks["migrations"] = "ok" if is_at_head(storage.engine) else "behind"
    except Exception as error:  # any failure to reach the database means not ready
        checks["database"] = f"unreachable: {type(error).__name__}"
    ready = all(v == "ok" for v in checks.values()) and "migrations" in checks
    body: dict[str, object] = {"status": "ready" if ready else "not ready", "checks": checks}
    if ready:
        local = request.app.state.local_mode.active()
        body["access"] = ("local mode: no API keys are configured, so only loopback callers are answered"
                          if local else "API keys")
    return JSONResponse(body, status_code=200 if ready else 503)
