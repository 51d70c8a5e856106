"""Use cases over storage: upload a catalog, create, list, read and recompute quotes, and run any
creating request once per Idempotency-Key. Each takes the storage and owns its transaction; the HTTP
layer and the command line only call these."""

import hashlib
import json
from collections import OrderedDict
from collections.abc import Callable
from dataclasses import dataclass
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any

from sqlalchemy.exc import IntegrityError

from service.access import LOCAL, Principal
from service.api.schemas.catalog import CatalogIn
from service.api.schemas.request import QuoteRequestIn
from service.errors import Conflict, FieldProblem, Forbidden, InvalidInput, NotFound
from service.loading import parse_document, validate
from service.quoting import catalog_hash, envelope, model_version, quote
from service.storage.repository import CatalogRef, Repository, Storage, StoredCatalog, StoredQuote, new_id

IDEMPOTENCY_KEEP = timedelta(hours=24)
IDEMPOTENCY_LEASE = timedelta(seconds=60)


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


@dataclass(frozen=True)
class Created:
    """What a creating request answers: its status and body, and whether it replays a first answer."""

    status_code: int
    body: dict[str, Any]
    replayed: bool = False


# Called by a creating use case inside the transaction that stores what it created, with the answer:
# the answer is then kept under the request's Idempotency-Key in that same commit.
KeepAnswer = Callable[[Repository, int, dict[str, Any]], None]


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


def body_fingerprint(body: bytes) -> str:
    """sha256 of the request's JSON, canonicalised, so whitespace and key order do not matter."""
    try:
        canonical = json.dumps(json.loads(body), sort_keys=True, separators=(",", ":")).encode("utf-8")
    except (ValueError, UnicodeDecodeError):
        canonical = body
    return hashlib.sha256(canonical).hexdigest()


def once_per_key(storage: Storage, *, caller: Principal, key: str | None, body: bytes, clock: Callable[[], datetime],
                 create: Callable[[KeepAnswer | None], Created]) -> Created:
    """Run a creating use case at most once per Idempotency-Key of the caller (conventions.md): the
    same key with the same body replays the first answer, with another body is refused, and a retry
    while the first still runs is told to wait. Without a key, `create` just runs."""
    if key is None:
        return create(None)
    with storage.writing() as repository:
        claim = repository.claim_key(caller=caller.key_id, key=key, body_hash=body_fingerprint(body), now=clock(),
                                     lease=IDEMPOTENCY_LEASE, keep=IDEMPOTENCY_KEEP)
    if not claim.same_body:
        raise InvalidInput("this Idempotency-Key was used with a different request body", [
            FieldProblem("header.idempotency-key", "already used with another request body; send a new key")])
    if claim.state == "in_flight":
        raise Conflict("a request with this Idempotency-Key is still being processed; retry shortly")
    if claim.state == "done" and claim.response is not None:
        return Created(claim.status_code or 201, claim.response, replayed=True)

    def keep(repository: Repository, status_code: int, answer: dict[str, Any]) -> None:
        repository.complete_key(caller=caller.key_id, key=key, status_code=status_code, response=answer)

    try:
        return create(keep)
    except Exception:
        with storage.writing() as repository:
            repository.release_key(caller=caller.key_id, key=key)
        raise


def create_quote(storage: Storage, catalogs: ParsedCatalogs, request: QuoteRequestIn, *,
                 clock: Callable[[], datetime], caller: Principal, keep: KeepAnswer | None = None) -> Created:
    """Quote and store. A requester files quotes for its own team only."""
    if caller.role == "requester" and request.campaign.team != caller.team:
        raise Forbidden(f"this key files quotes for team {caller.team!r}, not {request.campaign.team!r}")
    stored_catalog = catalog_to_use(storage, request.catalog_id, field="catalog_id")
    body = quote(catalogs.get(stored_catalog, storage), request)
    quote_id = new_id("q")
    normalised = request.model_dump(mode="json")
    with storage.writing() as repository:
        # Stamped once the write lock is held, not when the request arrived: quotes are then created
        # in the order they are stored, so a client that asks for those created after the newest it
        # has seen never misses one that took longer to compute (on SQLite, whose writers queue;
        # PostgreSQL commits concurrent writers in any order).
        now = clock()
        document = envelope(body, catalog_hash=stored_catalog.content_hash, quote_id=quote_id,
                            catalog_id=stored_catalog.id, created_at=now)
        stored = StoredQuote(id=quote_id, created_at=now, team=request.campaign.team,
                             campaign_name=request.campaign.name, catalog_id=stored_catalog.id,
                             catalog_hash=stored_catalog.content_hash, model_version=document["model_version"],
                             request=normalised, response=document)
        repository.add_quote(stored)
        if keep is not None:
            keep(repository, 201, document)
    return Created(201, document)


def find_quotes(storage: Storage, viewer: Principal, *, team: str | None, campaign_name: str | None,
                created_from: datetime | None, created_to: datetime | None, limit: int,
                cursor: str | None) -> tuple[list[StoredQuote], str | None]:
    """A page of stored quotes, newest first; a requester's filter is always its own team."""
    for name, moment in (("created_from", created_from), ("created_to", created_to)):
        if moment is not None and moment.tzinfo is None:
            problem = FieldProblem(name, "give a UTC offset, e.g. 2027-01-01T00:00:00Z")
            raise InvalidInput("times need a zone", [problem])
    if viewer.role == "requester":
        if team is not None and team != viewer.team:
            return [], None  # another team's quotes are never revealed, not even as a refusal
        team = viewer.team
    with storage.reading() as repository:
        return repository.quotes(limit=limit, cursor=cursor, team=team, campaign_name=campaign_name,
                                 created_from=created_from, created_to=created_to)


def get_quote(storage: Storage, quote_id: str, viewer: Principal = LOCAL) -> StoredQuote:
    """A stored quote, if the viewer may see its team's quotes; another team's is simply not found."""
    with storage.reading() as repository:
        stored = repository.quote(quote_id)
    if stored is None or not viewer.sees_team(stored.team):
        raise NotFound(f"no quote {quote_id!r}")
    return stored


def recompute_quote(storage: Storage, catalogs: ParsedCatalogs, quote_id: str,
                    viewer: Principal = LOCAL) -> dict[str, Any]:
    """Recompute a stored quote from its stored request and catalog, and say what differs."""
    stored = get_quote(storage, quote_id, viewer)
    request = QuoteRequestIn.model_validate(stored.request)
    recomputed = quote(catalogs.get(CatalogRef(stored.catalog_id, stored.catalog_hash), storage), request)
    previous = {k: v for k, v in stored.response.items()
                if k not in ("id", "created_at", "catalog_id", "catalog_hash", "model_version")}
    differences = list(_differences(previous, recomputed, ""))
    return {
        "quote_id": quote_id,
        "catalog_id": stored.catalog_id,
        "model_version_stored": stored.model_version,
        "model_version_now": model_version(),
        "changed": bool(differences),
        "differences": differences[:1000],
        "differences_total": len(differences),
    }


def _differences(old: Any, new: Any, path: str) -> Any:
    if isinstance(old, dict) and isinstance(new, dict):
        for key in sorted(set(old) | set(new)):
            yield from _differences(old.get(key), new.get(key), f"{path}.{key}" if path else key)
    elif isinstance(old, list) and isinstance(new, list) and len(old) == len(new):
        for k, (a, b) in enumerate(zip(old, new, strict=True)):
            yield from _differences(a, b, f"{path}[{k}]")
    elif _numbers(old, new):
        if abs(old - new) > 1e-9 * max(abs(old), abs(new), 1e-300):
            yield {"path": path, "stored": old, "recomputed": new}
    elif old != new:
        yield {"path": path, "stored": old, "recomputed": new}


def _numbers(a: Any, b: Any) -> bool:
    return all(isinstance(x, int | float) and not isinstance(x, bool) for x in (a, b))
