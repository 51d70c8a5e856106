"""Catalogs: upload (validated, stored immutably with a content hash), list, read."""

from typing import Annotated, Any

from fastapi import APIRouter, Query, Request
from fastapi.responses import JSONResponse

from service.api.auth import Admin, AnyKey
from service.api.deps import NowDep, RawBodyDep, StorageDep
from service.api.problems import PROBLEM_RESPONSES
from service.api.schemas.catalog import CatalogIn
from service.api.schemas.quote import CatalogOut, CatalogPage
from service.errors import FieldProblem, InvalidInput
from service.loading import parse_document
from service.storage.repository import StoredCatalog
from service.use_cases import find_catalogs, get_catalog, upload_catalog

router = APIRouter(prefix="/v1/catalogs", tags=["catalogs"])


def catalog_out(stored: StoredCatalog, *, with_content: bool) -> dict[str, Any]:
    body: dict[str, Any] = {
        "id": stored.id, "name": stored.name, "currency": stored.currency, "content_hash": stored.content_hash,
        "created_at": stored.created_at.isoformat().replace("+00:00", "Z"),
    }
    if with_content:
        body["content"] = stored.content
    return body


@router.post(
    "",
    status_code=201,
    response_model=CatalogOut,
    responses={200: {"model": CatalogOut, "description": "identical content was already stored"},
               **PROBLEM_RESPONSES},
    openapi_extra={"requestBody": {"required": True, "content": {
        "application/json": {"schema": {"$ref": "#/components/schemas/CatalogIn"}},
        "application/yaml": {"schema": {"$ref": "#/components/schemas/CatalogIn"}}}}},
)
def create_catalog(request: Request, body: RawBodyDep, storage: StorageDep, now: NowDep, _admin: Admin) -> JSONResponse:
    """Upload a catalog (JSON, or YAML with a YAML content type). Identical content returns the
    catalog already stored, with 200."""
    if not body.strip():
        raise InvalidInput("the request body is empty", [FieldProblem("(body)", "send a catalog as JSON or YAML")])
    data = parse_document(body.decode("utf-8", errors="replace"), source="the request body")
    if not isinstance(data, dict):
        raise InvalidInput("a catalog is an object", [FieldProblem("(body)", "expected a JSON or YAML object")])
    stored, created = upload_catalog(storage, data, now=now)
    return JSONResponse(catalog_out(stored, with_content=True), status_code=201 if created else 200,
                        headers={"Location": f"/v1/catalogs/{stored.id}"})


@router.get("", response_model=CatalogPage, responses=PROBLEM_RESPONSES)
def list_catalogs(storage: StorageDep, _viewer: AnyKey, limit: Annotated[int, Query(ge=1, le=200)] = 50,
                  cursor: Annotated[str | None, Query(max_length=200)] = None) -> dict[str, Any]:
    """Catalogs, newest first."""
    items, next_cursor = find_catalogs(storage, limit=limit, cursor=cursor)
    return {"items": [catalog_out(c, with_content=False) for c in items], "next_cursor": next_cursor}


@router.get("/{catalog_id}", response_model=CatalogOut, responses=PROBLEM_RESPONSES)
def read_catalog(catalog_id: str, storage: StorageDep, _viewer: AnyKey) -> dict[str, Any]:
    """One catalog with its content."""
    return catalog_out(get_catalog(storage, catalog_id), with_content=True)


# Referenced from the request body schema above.
CATALOG_SCHEMA = CatalogIn
