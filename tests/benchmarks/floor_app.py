"""The service with three extra routes that each do only part of what POST /v1/quotes does: a
benchmark instrument for `bench_quotes.py`, never part of the service.

Each takes the same body (validated as a quote request), runs on the compute lane as quotes do, and
answers 201 with a quote document:
  - POST /floor/validated: a canned document (a real quote, computed once): HTTP, validation, the answer.
  - POST /floor/stored: the canned document under a new id, stored durably as a quote: the above plus
    the database write.
  - POST /floor/computed: the quote computed for this body, not stored: the above but the model
    instead of the write.
  - POST /floor/documented: everything POST /v1/quotes does but evaluate the campaign: the first
    request's evaluation is kept, and each request builds its document from it (for this body's
    request fields, so the figures are the first body's), envelopes it, stores it and answers it.
    The quote with its model's evaluation free: the most any evaluation, however fast, could reach.
What a route costs the server beyond GET /healthz is the least any quote model could add on top of it.

    .venv/bin/python tests/benchmarks/floor_app.py --port 8001 --database sqlite:///floor.db [--workers 2]

It is served as `berth serve` serves the service: one process, or with --workers N, N worker processes
that each build the app from the environment (`create_floor_app_from_environment`).
"""

import argparse
import sys
from collections.abc import Callable
from datetime import datetime
from functools import partial
from pathlib import Path
from typing import Any

from fastapi import FastAPI

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from service.api.app import create_app
from service.api.deps import CatalogsDep, ComputeLaneDep, NowDep, StorageDep
from service.api.responses import FastJSONResponse
from service.api.serving import run_server
from service.config import Settings
from service.contract.request import QuoteRequestIn
from service.domain.evaluate import CampaignEvaluation
from service.domain.split import evaluate_with_splits
from service.storage.repository import CatalogRef, Storage, StoredQuote, new_id
from service.usecases.catalogs import ParsedCatalogs, catalog_to_use
from service.usecases.quoting import envelope, quote


def _computed(payload: QuoteRequestIn, storage: Storage, catalogs: ParsedCatalogs, now: datetime, *,
              evaluate: Callable[..., CampaignEvaluation] = evaluate_with_splits) -> tuple[CatalogRef, dict[str, Any]]:
    ref = catalog_to_use(storage, payload.catalog_id, field="catalog_id", on=now.date())
    body = quote(catalogs.get(ref, storage), payload, evaluate=evaluate)
    return ref, envelope(body, catalog_hash=ref.content_hash, quote_id=new_id("q"), catalog_id=ref.id,
                         created_at=now)


def _store(storage: Storage, payload: QuoteRequestIn, ref: CatalogRef, document: dict[str, Any],
           now: datetime) -> None:
    """The document stored durably as a quote, as POST /v1/quotes stores one."""
    row = StoredQuote(id=document["id"], created_at=now, team=payload.campaign.team,
                      campaign_name=payload.campaign.name, catalog_id=ref.id, catalog_hash=ref.content_hash,
                      model_version=document["model_version"], request=payload.model_dump(mode="json"),
                      response=document)
    with storage.writing() as repository:
        repository.add_quote(row)


def create_floor_app(settings: Settings) -> FastAPI:
    app = create_app(settings)
    canned: dict[str, Any] = {}  # the first request's quote, with its catalog
    evaluated: dict[str, Any] = {}  # the first request's evaluation

    def canned_quote(payload: QuoteRequestIn, storage: Storage, catalogs: ParsedCatalogs,
                     now: datetime) -> tuple[CatalogRef, dict[str, Any]]:
        if not canned:
            canned["ref"], canned["document"] = _computed(payload, storage, catalogs, now)
        return canned["ref"], canned["document"]

    def validated(payload: QuoteRequestIn, storage: Storage, catalogs: ParsedCatalogs,
                  now: datetime) -> FastJSONResponse:
        return FastJSONResponse(canned_quote(payload, storage, catalogs, now)[1], status_code=201)

    def stored(payload: QuoteRequestIn, storage: Storage, catalogs: ParsedCatalogs,
               now: datetime) -> FastJSONResponse:
        ref, document = canned_quote(payload, storage, catalogs, now)
        document = {**document, "id": new_id("q")}
        _store(storage, payload, ref, document, now)
        return FastJSONResponse(document, status_code=201)

    def kept_evaluation(*args: Any) -> CampaignEvaluation:
        if not evaluated:
            evaluated["evaluation"] = evaluate_with_splits(*args)
        evaluation: CampaignEvaluation = evaluated["evaluation"]
        return evaluation

    def documented(payload: QuoteRequestIn, storage: Storage, catalogs: ParsedCatalogs,
                   now: datetime) -> FastJSONResponse:
        ref, document = _computed(payload, storage, catalogs, now, evaluate=kept_evaluation)
        _store(storage, payload, ref, document, now)
        return FastJSONResponse(document, status_code=201)

    def computed(payload: QuoteRequestIn, storage: Storage, catalogs: ParsedCatalogs,
                 now: datetime) -> FastJSONResponse:
        return FastJSONResponse(_computed(payload, storage, catalogs, now)[1], status_code=201)

    for path, handler in (("/floor/validated", validated), ("/floor/stored", stored), ("/floor/computed", computed),
                          ("/floor/documented", documented)):
        app.add_api_route(path, _on_compute_lane(handler), methods=["POST"], status_code=201)
    return app


def create_floor_app_from_environment() -> FastAPI:
    """The factory each worker process calls: the floor app on settings read from BERTH_* variables."""
    return create_floor_app(Settings())


def _on_compute_lane(handler: Callable[..., FastJSONResponse]) -> Callable[..., Any]:
    """A route that runs `handler` on the compute lane, as POST /v1/quotes runs its work."""
    async def route(payload: QuoteRequestIn, storage: StorageDep, catalogs: CatalogsDep, now: NowDep,
                    lane: ComputeLaneDep) -> FastJSONResponse:
        response: FastJSONResponse = await lane.run(partial(handler, payload, storage, catalogs, now))
        return response
    return route


def main() -> None:
    """Serve the floor app as `berth serve` serves the service: the same server options, in one process
    or in `--workers` processes that each build their own app (and engine)."""
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--host", default="127.0.0.1")
    parser.add_argument("--port", type=int, required=True)
    parser.add_argument("--database", required=True)
    parser.add_argument("--workers", type=int, default=1, help="worker processes (default %(default)s)")
    args = parser.parse_args()
    if args.workers < 1:
        parser.error("--workers must be at least 1")
    overrides: dict[str, Any] = {"host": args.host, "port": args.port, "database_url": args.database}
    # The workers import this module by name: its directory is first on sys.path when run as a script.
    run_server(overrides, workers=args.workers, app=create_floor_app,
               factory="floor_app:create_floor_app_from_environment")

if __name__ == "__main__":
    main()
