"""Quote use cases over storage: create (quote and store), list, read and recompute. Each takes the
storage and owns its transaction; the HTTP layer and the command line only call these."""

from collections.abc import Callable
from datetime import datetime
from typing import Any

from service.contract.request import QuoteRequestIn
from service.errors import FieldProblem, Forbidden, InvalidInput, NotFound
from service.storage.repository import CatalogRef, Storage, StoredQuote, new_id
from service.usecases.access import LOCAL, Principal
from service.usecases.catalogs import ParsedCatalogs, catalog_to_use
from service.usecases.differences import differences
from service.usecases.idempotency import Created, KeepAnswer
from service.usecases.quoting import envelope, model_version, quote


def create_quote(storage: Storage, catalogs: ParsedCatalogs, request: QuoteRequestIn, *,
                 clock: Callable[[], datetime], caller: Principal, keep: KeepAnswer | None = None) -> Created:
    """Quote and store. A requester files quotes for its own team only."""
    if caller.role == "requester" and request.campaign.team != caller.team:
        raise Forbidden(f"this key files quotes for team {caller.team!r}, not {request.campaign.team!r}")
    stored_catalog = catalog_to_use(storage, request.catalog_id, field="catalog_id", on=clock().date())
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
    found = [{"path": d["path"], "stored": d["a"], "recomputed": d["b"]} for d in differences(previous, recomputed)]
    return {
        "quote_id": quote_id,
        "catalog_id": stored.catalog_id,
        "model_version_stored": stored.model_version,
        "model_version_now": model_version(),
        "changed": bool(found),
        "differences": found[:1000],
        "differences_total": len(found),
    }
