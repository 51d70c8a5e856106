"""Every error as RFC 9457 problem details (application/problem+json): the project's own errors,
Starlette's HTTP errors, request validation (a list of field paths and reasons). The catch-all 500,
which hides the trace, is answered by `middleware.RequestContext`, inside the request's context."""

import logging
import re
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from pydantic import BaseModel
from starlette.exceptions import HTTPException
from starlette.requests import ClientDisconnect

from service.api.observability import domain_metrics
from service.errors import BerthError, InvalidInput, Unavailable
from service.usecases.loading import field_problems_from_list

PROBLEM = "application/problem+json"
log = logging.getLogger("berth.errors")

TYPES = {
    400: "bad-request", 401: "unauthorized", 403: "forbidden", 404: "not-found", 405: "method-not-allowed",
    409: "conflict", 413: "payload-too-large", 415: "unsupported-media-type", 422: "invalid-input",
    429: "too-many-requests", 500: "internal-error", 503: "unavailable",
}


def problem(status: int, title: str, detail: str, *, errors: list[dict[str, str]] | None = None,
            headers: dict[str, str] | None = None, counted: bool = True) -> JSONResponse:
    if counted:
        domain_metrics().errors.labels(type=TYPES.get(status, "error")).inc()
    body: dict[str, Any] = {"type": f"/problems/{TYPES.get(status, 'error')}", "title": title,
                            "status": status, "detail": detail}
    if errors is not None:
        body["errors"] = errors
    return JSONResponse(body, status_code=status, media_type=PROBLEM, headers=headers)


def install(app: FastAPI) -> None:
    @app.exception_handler(BerthError)
    async def _own(_request: Request, error: BerthError) -> JSONResponse:
        errors = None
        if isinstance(error, InvalidInput):
            errors = [{"field": p.field, "reason": p.reason} for p in error.problems]
        headers = {"Retry-After": str(error.retry_after_seconds)} if isinstance(error, Unavailable) else None
        return problem(error.status, error.title, error.detail, errors=errors, headers=headers)

    @app.exception_handler(RequestValidationError)
    async def _validation(request: Request, error: RequestValidationError) -> JSONResponse:
        problems = field_problems_from_list(list(error.errors()), _body_model(request))
        errors = [{"field": p.field, "reason": p.reason} for p in problems]
        return problem(422, "Invalid input", "the request does not match the schema", errors=errors)

    @app.exception_handler(HTTPException)
    async def _http(request: Request, error: HTTPException) -> JSONResponse:
        headers = dict(error.headers) if error.headers else {}
        if error.status_code == 405:
            # The router answers with the first route that matched the path; name every method.
            headers["Allow"] = ", ".join(allowed_methods(request))
        return problem(error.status_code, _title(error.status_code), str(error.detail), headers=headers or None)

    @app.exception_handler(ClientDisconnect)
    async def _gone(_request: Request, _error: ClientDisconnect) -> JSONResponse:
        # The client left (or the body limit answered for it): nobody reads this answer.
        return problem(400, "Client disconnected", "the request body ended early", counted=False)



def _body_model(request: Request) -> type[BaseModel] | None:
    """The model the route validates its body with, to suggest the field a typo meant."""
    route = request.scope.get("route")
    field = getattr(route, "body_field", None)
    model = getattr(getattr(field, "field_info", None), "annotation", None)
    return model if isinstance(model, type) and issubclass(model, BaseModel) else None


def allowed_methods(request: Request) -> list[str]:
    """Every method any route of this path answers, read from the app's OpenAPI paths. A path named
    literally (`/v1/catalogs/default`) is its own resource, not an instance of a template beside it."""
    paths = request.app.openapi().get("paths", {})
    matching = [t for t in paths if re.fullmatch(re.sub(r"\{[^/]+\}", "[^/]+", t), request.url.path)]
    literal = [t for t in matching if t == request.url.path]
    methods: set[str] = set()
    for template in literal or matching:
        methods |= {m.upper() for m in paths[template]}
    if "GET" in methods:
        methods.add("HEAD")
    return sorted(methods)


def _title(status: int) -> str:
    return TYPES.get(status, "error").replace("-", " ").capitalize()


def _problems(*statuses: int) -> dict[int | str, dict[str, Any]]:
    return {status: {"description": TYPES[status].replace("-", " "), "model": None,
                     "content": {PROBLEM: {"schema": {"$ref": "#/components/schemas/Problem"}}}}
            for status in statuses}


PROBLEM_RESPONSES = _problems(400, 404, 413, 422)  # 400: an unreadable body; 413: one over the size limit
# A route that reads a body: one in a media type it does not read.
MEDIA_TYPE_RESPONSES = _problems(415)
# A creating route with an Idempotency-Key whose first request is still running.
CONFLICT: dict[int | str, dict[str, Any]] = {
    409: {"description": "a request with this Idempotency-Key is still in flight",
          "content": {PROBLEM: {"schema": {"$ref": "#/components/schemas/Problem"}}}}}
# Every route behind a key: no or a wrong key, a role that may not, too many requests, too slow.
ACCESS_RESPONSES = _problems(401, 403, 429, 503)
