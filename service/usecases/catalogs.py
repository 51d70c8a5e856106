"""Catalog use cases: upload (identical content stored once), read, list, the demo catalog of a new
service, the lifecycle (active or retired; one default, set by an admin) and which catalog a request
uses on a date. Each takes the storage and owns its transaction."""

from collections import OrderedDict
from datetime import date, datetime
from pathlib import Path
from typing import Any

from sqlalchemy.exc import IntegrityError

from service.contract.catalog import CatalogIn
from service.errors import Conflict, FieldProblem, InvalidInput, NotFound
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


def catalog_body(stored: StoredCatalog, *, with_content: bool, default_id: str | None) -> dict[str, Any]:
    """A stored catalog as the API answers it."""
    body: dict[str, Any] = {
        "id": stored.id, "name": stored.name, "currency": stored.currency, "content_hash": stored.content_hash,
        "created_at": stored.created_at.isoformat().replace("+00:00", "Z"),
        "status": stored.status, "default": stored.id == default_id,
        "effective_from": _iso(stored.effective_from), "effective_until": _iso(stored.effective_until),
    }
    if with_content:
        body["content"] = stored.content
    return body


def _iso(day: date | None) -> str | None:
    return None if day is None else day.isoformat()


def upload_catalog(storage: Storage, data: Any, *, now: datetime,
                   keep: KeepAnswer | None = None) -> tuple[dict[str, Any], bool]:
    """Validate and store a catalog, active; identical content returns the catalog already stored and
    changes nothing. An upload never changes the default, except that the first catalog of a database
    without one becomes it (exactly one default whenever there is a catalog). `keep` (from
    `once_per_key`) is given the answer in the same transaction."""
    catalog = validate(CatalogIn, data, source="catalog")
    content = catalog.model_dump(mode="json")
    digest = catalog_hash(catalog)

    def answered(repository: Repository, stored: StoredCatalog, created: bool) -> tuple[dict[str, Any], bool]:
        body = catalog_body(stored, with_content=True, default_id=repository.default_catalog_id())
        if keep is not None:
            keep(repository, 201 if created else 200, body)
        return body, created

    try:
        with storage.writing() as repository:
            existing = repository.catalog_by_hash(digest)
            if existing is not None:
                return answered(repository, existing, False)
            stored = repository.add_catalog(name=catalog.name, currency=catalog.currency, content_hash=digest,
                                            content=content, created_at=now, effective_from=catalog.effective_from,
                                            effective_until=catalog.effective_until)
            if repository.default_catalog_id() is None:
                repository.set_default_catalog(stored.id, now=now)
            return answered(repository, stored, True)
    except IntegrityError:
        # Another replica stored the same content between our read and our insert.
        with storage.writing() as repository:
            existing = repository.catalog_by_hash(digest)
            if existing is None:
                raise
            return answered(repository, existing, False)


def load_demo_catalog(storage: Storage, path: Path, *, now: datetime) -> dict[str, Any] | None:
    """Store the demo catalog when the database holds none, so a new service answers at once (as
    the first catalog, it becomes the default)."""
    with storage.reading() as repository:
        if repository.catalogs(limit=1, cursor=None)[0]:
            return None
    body, _ = upload_catalog(storage, parse_document(path.read_text(encoding="utf-8"), source=str(path)), now=now)
    return body


def get_catalog(storage: Storage, catalog_id: str | None) -> dict[str, Any]:
    """A stored catalog with its content; None: the default."""
    with storage.reading() as repository:
        default_id = repository.default_catalog_id()
        wanted = catalog_id or default_id
        stored = None if wanted is None else repository.catalog(wanted)
    if stored is None:
        raise NotFound("no default catalog is set" if catalog_id is None else f"no catalog {catalog_id!r}")
    return catalog_body(stored, with_content=True, default_id=default_id)


def find_catalogs(storage: Storage, *, limit: int, cursor: str | None,
                  status: str | None = None) -> tuple[list[dict[str, Any]], str | None]:
    with storage.reading() as repository:
        default_id = repository.default_catalog_id()
        items, next_cursor = repository.catalogs(limit=limit, cursor=cursor, status=status)
    return [catalog_body(c, with_content=False, default_id=default_id) for c in items], next_cursor


def unusable_because(ref: CatalogRef, on: date) -> str | None:
    """Why a quote on the day `on` may not use the catalog, or None when it may."""
    named = f"catalog {ref.id!r} ({ref.name})"
    if ref.status != "active":
        return f"{named} is {ref.status}"
    if ref.effective_from is not None and on < ref.effective_from:
        return f"{named} takes effect on {ref.effective_from}, after {on}"
    if ref.effective_until is not None and on > ref.effective_until:
        return f"{named} was effective until {ref.effective_until}, before {on}"
    return None


def catalog_to_use(storage: Storage, catalog_id: str | None, *, field: str, on: date) -> CatalogRef:
    """The catalog a request names in `field`, or the default when it names none, if a quote may use
    it on the day `on` (its content is read only when `ParsedCatalogs` has not parsed it yet)."""
    with storage.reading() as repository:
        stored = repository.catalog_ref(catalog_id)
    if stored is None:
        if catalog_id is None:
            raise InvalidInput("no default catalog", [FieldProblem(
                field, "no default catalog is set: name a catalog_id, or have an admin set one with "
                       "PUT /v1/catalogs/default")])
        raise InvalidInput("unknown catalog", [FieldProblem(field, f"no catalog {catalog_id!r}")])
    reason = unusable_because(stored, on)
    if reason is not None:
        which = "the default " if catalog_id is None else ""
        raise InvalidInput("the catalog may not be used on this date",
                           [FieldProblem(field, f"{which}{reason}")])
    return stored


def set_default_catalog(storage: Storage, catalog_id: str, *, now: datetime) -> dict[str, Any]:
    """Make a catalog the default: only an active one that a quote may use today."""
    with storage.writing() as repository:
        ref = repository.catalog_ref(catalog_id)
        if ref is None:
            raise InvalidInput("unknown catalog", [FieldProblem("catalog_id", f"no catalog {catalog_id!r}")])
        reason = unusable_because(ref, now.date())
        if reason is not None:
            raise InvalidInput("this catalog cannot be the default", [FieldProblem("catalog_id", reason)])
        repository.set_default_catalog(catalog_id, now=now)
        stored = repository.catalog(catalog_id)
        assert stored is not None
        return catalog_body(stored, with_content=False, default_id=catalog_id)


def set_catalog_status(storage: Storage, catalog_id: str, status: str) -> dict[str, Any]:
    """Retire a catalog (quotes may no longer use it; stored quotes and recomputes still read it) or
    make it active again. The default cannot be retired: set another default first."""
    with storage.writing() as repository:
        stored = repository.catalog(catalog_id)
        if stored is None:
            raise NotFound(f"no catalog {catalog_id!r}")
        default_id = repository.default_catalog_id()
        if status == "retired" and catalog_id == default_id:
            raise Conflict(f"catalog {catalog_id!r} is the default; set another default before retiring it")
        repository.set_catalog_status(catalog_id, status)
        changed = repository.catalog(catalog_id)
        assert changed is not None
        return catalog_body(changed, with_content=False, default_id=default_id)
