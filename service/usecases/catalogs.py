"""Catalog use cases: upload (identical content stored once), read, list, the demo catalog of a new
service, and which catalog a request uses. Each takes the storage and owns its transaction."""

from collections import OrderedDict
from datetime import datetime
from pathlib import Path
from typing import Any

from sqlalchemy.exc import IntegrityError

from service.contract.catalog import CatalogIn
from service.errors import FieldProblem, InvalidInput, NotFound
from service.storage.repository import CatalogRef, Repository, Storage, StoredCatalog
from service.usecases.idempotency import KeepAnswer
from service.usecases.loading import parse_document, validate
from service.usecases.quoting import catalog_hash


class ParsedCatalogs:
    """Validated catalogs by content hash: stored catalogs never change, so reading and parsing
    each once is enough."""

    def __init__(self, size: int = 32) -> None:
        self._items: OrderedDict[str, CatalogIn] = OrderedDict()
        self._size = size

    def get(self, ref: CatalogRef, storage: Storage) -> CatalogIn:
        parsed = self._items.get(ref.content_hash)
        if parsed is None:
            with storage.reading() as repository:
                stored = repository.catalog(ref.id)
            if stored is None:  # catalogs are never deleted; say so plainly if one is
                raise NotFound(f"the catalog {ref.id!r} is gone")
            parsed = CatalogIn.model_validate(stored.content)
            self._items[ref.content_hash] = parsed
            if len(self._items) > self._size:
                self._items.popitem(last=False)
        self._items.move_to_end(ref.content_hash)
        return parsed


def catalog_body(stored: StoredCatalog, *, with_content: bool) -> dict[str, Any]:
    """A stored catalog as the API answers it."""
    body: dict[str, Any] = {
        "id": stored.id, "name": stored.name, "currency": stored.currency, "content_hash": stored.content_hash,
        "created_at": stored.created_at.isoformat().replace("+00:00", "Z"),
    }
    if with_content:
        body["content"] = stored.content
    return body


def upload_catalog(storage: Storage, data: Any, *, now: datetime,
                   keep: KeepAnswer | None = None) -> tuple[StoredCatalog, bool]:
    """Validate and store a catalog; identical content returns the catalog already stored. `keep`
    (from `once_per_key`) is given the answer in the same transaction."""
    catalog = validate(CatalogIn, data, source="catalog")
    content = catalog.model_dump(mode="json")
    digest = catalog_hash(catalog)

    def answered(repository: Repository, stored: StoredCatalog, created: bool) -> tuple[StoredCatalog, bool]:
        if keep is not None:
            keep(repository, 201 if created else 200, catalog_body(stored, with_content=True))
        return stored, created

    try:
        with storage.writing() as repository:
            existing = repository.catalog_by_hash(digest)
            if existing is not None:
                return answered(repository, existing, False)
            stored = repository.add_catalog(name=catalog.name, currency=catalog.currency, content_hash=digest,
                                            content=content, created_at=now)
            return answered(repository, stored, True)
    except IntegrityError:
        # Another replica stored the same content between our read and our insert.
        with storage.writing() as repository:
            existing = repository.catalog_by_hash(digest)
            if existing is None:
                raise
            return answered(repository, existing, False)


def load_demo_catalog(storage: Storage, path: Path, *, now: datetime) -> StoredCatalog | None:
    """Store the demo catalog when the database holds none, so a new service answers at once."""
    with storage.reading() as repository:
        if repository.catalog_ref(None) is not None:
            return None
    stored, _ = upload_catalog(storage, parse_document(path.read_text(encoding="utf-8"), source=str(path)), now=now)
    return stored


def get_catalog(storage: Storage, catalog_id: str) -> StoredCatalog:
    with storage.reading() as repository:
        stored = repository.catalog(catalog_id)
    if stored is None:
        raise NotFound(f"no catalog {catalog_id!r}")
    return stored


def find_catalogs(storage: Storage, *, limit: int, cursor: str | None) -> tuple[list[StoredCatalog], str | None]:
    with storage.reading() as repository:
        return repository.catalogs(limit=limit, cursor=cursor)


def catalog_to_use(storage: Storage, catalog_id: str | None, *, field: str) -> CatalogRef:
    """The catalog a request names in `field`, or the newest when it names none (its content is
    read only when `ParsedCatalogs` has not parsed it yet)."""
    with storage.reading() as repository:
        stored = repository.catalog_ref(catalog_id)
    if stored is None:
        if catalog_id is None:
            raise NotFound("no catalog has been uploaded yet")
        raise InvalidInput("unknown catalog", [FieldProblem(field, f"no catalog {catalog_id!r}")])
    return stored
