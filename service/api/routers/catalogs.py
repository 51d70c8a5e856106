"""Catalogs: upload (validated, stored immutably with a content hash), list, read."""

from typing import Annotated, Any

from fastapi import APIRouter, Query
from fastapi.responses import Response

from service.api.auth import Admin, AnyKey
from service.api.deps import CatalogIdPath, ClockDep, CursorQuery, IdempotencyKeyDep, RawBodyDep, StorageDep
from service.api.problems import CONFLICT, PROBLEM_RESPONSES
from service.api.responses import created_response
from service.contract.answers import CatalogOut, CatalogPage
from service.contract.catalog import CatalogIn
from service.errors import FieldProblem, InvalidInput
from service.usecases.catalogs import catalog_body, find_catalogs, get_catalog, upload_catalog
from service.usecases.idempotency import Created, KeepAnswer, once_per_key
from service.usecases.loading import parse_document

router = APIRouter(prefix="/v1/catalogs", tags=["catalogs"])


@router.post(
    "",
    status_code=201,
    response_model=CatalogOut,
    responses={200: {"model": CatalogOut, "description": "identical content was already stored"},
               **PROBLEM_RESPONSES, **CONFLICT},
    openapi_extra={"requestBody": {"required": True, "content": {
        "application/json": {"schema": {"$ref": "#/components/schemas/CatalogIn"}},
        "application/yaml": {"schema": {"$ref": "#/components/schemas/CatalogIn"}}}}},
)
def create_catalog(body: RawBodyDep, storage: StorageDep, clock: ClockDep, caller: Admin,
                   idempotency_key: IdempotencyKeyDep = None) -> Response:
    """Upload a catalog (JSON, or YAML with a YAML content type). Identical content returns the
    catalog already stored, with 200. The same Idempotency-Key with the same body returns the first
    answer; with another body it is refused."""
    if not body.strip():
        raise InvalidInput("the request body is empty", [FieldProblem("(body)", "send a catalog as JSON or YAML")])
    data = parse_document(body.decode("utf-8", errors="replace"), source="the request body")
    if not isinstance(data, dict):
        raise InvalidInput("a catalog is an object", [FieldProblem("(body)", "expected a JSON or YAML object")])

    def create(keep: KeepAnswer | None) -> Created:
        stored, created = upload_catalog(storage, data, now=clock(), keep=keep)
        return Created(201 if created else 200, catalog_body(stored, with_content=True))

    outcome = once_per_key(storage, caller=caller, key=idempotency_key, body=body, clock=clock, create=create)
    return created_response(outcome, location=f"/v1/catalogs/{outcome.body['id']}")


@router.get("", response_model=CatalogPage, responses=PROBLEM_RESPONSES)
def list_catalogs(storage: StorageDep, _viewer: AnyKey, limit: Annotated[int, Query(ge=1, le=200)] = 50,
                  cursor: CursorQuery = None) -> dict[str, Any]:
    """Catalogs, newest first."""
    items, next_cursor = find_catalogs(storage, limit=limit, cursor=cursor)
    return {"items": [catalog_body(c, with_content=False) for c in items], "next_cursor": next_cursor}


@router.get("/{catalog_id}", response_model=CatalogOut, responses=PROBLEM_RESPONSES)
def read_catalog(catalog_id: CatalogIdPath, storage: StorageDep, _viewer: AnyKey) -> dict[str, Any]:
    """One catalog with its content."""
    return catalog_body(get_catalog(storage, catalog_id), with_content=True)


# Referenced from the request body schema above.
CATALOG_SCHEMA = CatalogIn
