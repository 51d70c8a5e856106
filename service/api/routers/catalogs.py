"""Catalogs: upload (validated, stored immutably with a content hash), list, read; the lifecycle
(retire, reactivate) and the default catalog."""

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Query
from fastapi.responses import Response
from starlette.exceptions import HTTPException as StarletteHTTPException

from service.api.auth import Admin, AnyKey
from service.api.deps import CatalogIdPath, ClockDep, CursorQuery, IdempotencyKeyDep, RawBodyDep, StorageDep
from service.api.manners import JsonBody, JsonOrYamlBody
from service.api.problems import CONFLICT, MEDIA_TYPE_RESPONSES, PROBLEM_RESPONSES
from service.api.responses import created_response
from service.contract.answers import CatalogOut, CatalogPage, CatalogSummary
from service.contract.catalog import CatalogIn, CatalogStatusIn, DefaultCatalogIn
from service.errors import FieldProblem, InvalidInput
from service.usecases.catalogs import (
    find_catalogs,
    get_catalog,
    set_catalog_status,
    set_default_catalog,
    upload_catalog,
)
from service.usecases.idempotency import Created, KeepAnswer, once_per_key
from service.usecases.loading import parse_document

router = APIRouter(prefix="/v1/catalogs", tags=["catalogs"])


@router.post(
    "",
    status_code=201,
    response_model=CatalogOut,
    dependencies=[JsonOrYamlBody],
    responses={200: {"model": CatalogOut, "description": "identical content was already stored"},
               **PROBLEM_RESPONSES, **MEDIA_TYPE_RESPONSES, **CONFLICT},
    openapi_extra={"requestBody": {"required": True, "content": {
        "application/json": {"schema": {"$ref": "#/components/schemas/CatalogIn"}},
        "application/yaml": {"schema": {"$ref": "#/components/schemas/CatalogIn"}}}}},
)
def create_catalog(body: RawBodyDep, storage: StorageDep, clock: ClockDep, caller: Admin,
                   idempotency_key: IdempotencyKeyDep = None) -> Response:
    """Upload a catalog (JSON, or YAML with a YAML content type). It is stored active and does not
    become the default (only the first catalog of an empty database does). Identical content returns
    the catalog already stored, with 200, and changes nothing. The same Idempotency-Key with the same
    body returns the first answer; with another body it is refused."""
    if not body.strip():
        raise InvalidInput("the request body is empty", [FieldProblem("(body)", "send a catalog as JSON or YAML")])
    data = parse_document(body.decode("utf-8", errors="replace"), source="the request body")
    if not isinstance(data, dict):
        raise InvalidInput("a catalog is an object", [FieldProblem("(body)", "expected a JSON or YAML object")])

    def create(keep: KeepAnswer | None) -> Created:
        body, created = upload_catalog(storage, data, now=clock(), keep=keep)
        return Created(201 if created else 200, body)

    outcome = once_per_key(storage, caller=caller, key=idempotency_key, body=body, clock=clock, create=create)
    return created_response(outcome, location=f"/v1/catalogs/{outcome.body['id']}")


@router.get("", response_model=CatalogPage, responses=PROBLEM_RESPONSES)
def list_catalogs(storage: StorageDep, _viewer: AnyKey, limit: Annotated[int, Query(ge=1, le=200)] = 50,
                  cursor: CursorQuery = None,
                  status: Annotated[Literal["active", "retired"] | None, Query()] = None) -> dict[str, Any]:
    """Catalogs, newest first, each with its status, effective dates and whether it is the default."""
    items, next_cursor = find_catalogs(storage, limit=limit, cursor=cursor, status=status)
    return {"items": items, "next_cursor": next_cursor}


@router.get("/default", response_model=CatalogOut, responses=PROBLEM_RESPONSES)
def read_default_catalog(storage: StorageDep, _viewer: AnyKey) -> dict[str, Any]:
    """The catalog that requests naming no `catalog_id` use."""
    return get_catalog(storage, None)


@router.put("/default", response_model=CatalogSummary, dependencies=[JsonBody],
            responses={**PROBLEM_RESPONSES, **MEDIA_TYPE_RESPONSES})
def put_default_catalog(payload: DefaultCatalogIn, storage: StorageDep, clock: ClockDep,
                        _admin: Admin) -> dict[str, Any]:
    """Make an active catalog, effective today, the default for requests that name none. Uploads
    never change the default; this is the only way to."""
    return set_default_catalog(storage, payload.catalog_id, now=clock())


@router.patch("/default", include_in_schema=False)
def patch_default_catalog() -> None:
    """`/default` is a resource of its own, read with GET and set with PUT: a PATCH meant for a
    catalog must not be taken for one whose id is "default"."""
    raise StarletteHTTPException(405, headers={"Allow": "GET, HEAD, PUT"})


@router.get("/{catalog_id}", response_model=CatalogOut, responses=PROBLEM_RESPONSES)
def read_catalog(catalog_id: CatalogIdPath, storage: StorageDep, _viewer: AnyKey) -> dict[str, Any]:
    """One catalog with its content."""
    return get_catalog(storage, catalog_id)


@router.patch("/{catalog_id}", response_model=CatalogSummary, dependencies=[JsonBody],
              responses={**PROBLEM_RESPONSES, **MEDIA_TYPE_RESPONSES,
                         409: {**CONFLICT[409], "description": "the default catalog cannot be retired"}})
def patch_catalog(catalog_id: CatalogIdPath, payload: CatalogStatusIn, storage: StorageDep,
                  _admin: Admin) -> dict[str, Any]:
    """Retire a catalog (new quotes, sweeps and plans may no longer use it; stored quotes keep it and
    recompute still reads it) or make it active again. Its content never changes. The default cannot
    be retired (409): set another default first."""
    return set_catalog_status(storage, catalog_id, payload.status)


# Referenced from the request body schema above.
CATALOG_SCHEMA = CatalogIn
