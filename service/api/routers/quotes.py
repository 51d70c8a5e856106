"""Quotes: create (stored, idempotent with a key), list, read (full or summary), recompute, compare,
re-quote against another catalog; the report, break-even chart and options CSV of a stored quote."""

import re
import time
from dataclasses import replace
from datetime import UTC, datetime
from typing import Annotated, Any

from fastapi import APIRouter, Query, Request
from fastapi.responses import HTMLResponse, Response, StreamingResponse
from pydantic import AfterValidator, BeforeValidator

from service.api.auth import AnyKey
from service.api.deps import (
    PRINTABLE,
    CatalogsDep,
    ClockDep,
    ComputeLaneDep,
    CursorQuery,
    IdempotencyKeyDep,
    QuoteIdPath,
    RawBodyDep,
    StorageDep,
)
from service.api.manners import JsonBody
from service.api.observability import DomainMetrics
from service.api.problems import CONFLICT, MEDIA_TYPE_RESPONSES, PROBLEM_RESPONSES
from service.api.responses import FastJSONResponse, created_response
from service.contract.answers import Comparison, QuoteOut, QuotePage, QuoteSummaryView, Recomputation, Requoted
from service.contract.request import QuoteRequestIn, RequoteIn
from service.contract.views import View, recommended, shaped
from service.reports.breakeven_chart import breakeven_svg
from service.reports.csv_export import options_csv
from service.reports.html import render_report
from service.storage.repository import StoredQuote
from service.usecases.comparing import compare_quotes, requote
from service.usecases.idempotency import Created, KeepAnswer, once_per_key
from service.usecases.quotes import create_quote, find_quotes, get_quote, recompute_quote

router = APIRouter(prefix="/v1/quotes", tags=["quotes"])
ViewQuery = Annotated[View, Query(description="`full` (the default): the whole stored document; `summary`: the "
                                              "recommendation and one row per option, about a fifth of the size")]


@router.post("", status_code=201, response_model=QuoteOut | QuoteSummaryView, dependencies=[JsonBody],
             responses={**PROBLEM_RESPONSES, **MEDIA_TYPE_RESPONSES, **CONFLICT})
async def post_quote(
    request: Request, payload: QuoteRequestIn, raw: RawBodyDep, storage: StorageDep, catalogs: CatalogsDep,
    clock: ClockDep, caller: AnyKey, lane: ComputeLaneDep, idempotency_key: IdempotencyKeyDep = None,
    view: ViewQuery = "full",
) -> Response:
    """Quote one campaign against a catalog (default: the default catalog), store it, and return it
    (`?view=summary` for the lean shape; the full document is stored either way). The same
    Idempotency-Key with the same body returns the first answer."""
    metrics: DomainMetrics = request.app.state.metrics

    def create(keep: KeepAnswer | None) -> Created:
        started = time.perf_counter()
        created = create_quote(storage, catalogs, payload, clock=clock, caller=caller, keep=keep)
        metrics.quote_seconds.observe(time.perf_counter() - started)
        metrics.quotes_created.inc()
        return created

    def on_compute_lane() -> Response:
        outcome = once_per_key(storage, caller=caller, key=idempotency_key, body=raw, clock=clock, create=create)
        return created_response(replace(outcome, body=shaped(outcome.body, view)),
                                location=f"/v1/quotes/{outcome.body['id']}")

    return await lane.run(on_compute_lane)


def _iso_8601(value: object) -> object:
    """Pydantic would also read a bare number as a Unix time; the API takes ISO 8601 date-times."""
    if isinstance(value, str) and not re.match(r"\d{4}-\d\d-\d\d", value):
        raise ValueError("give an ISO 8601 date-time, e.g. 2027-01-01T00:00:00Z")
    return value


def _in_utc(value: datetime) -> datetime:
    """Bounds are compared in UTC; a moment with no UTC equivalent (year 1 at +23:59) is refused."""
    try:
        return value if value.tzinfo is None else value.astimezone(UTC)  # no zone: refused by the use case
    except OverflowError as error:
        raise ValueError("the moment lies outside the years 1 to 9999 once converted to UTC") from error


IsoDateTime = BeforeValidator(_iso_8601)
InUtc = AfterValidator(_in_utc)


def summary(stored: StoredQuote) -> dict[str, Any]:
    picked = recommended(stored.response)
    return {
        "id": stored.id,
        "created_at": stored.created_at.isoformat().replace("+00:00", "Z"),
        "team": stored.team,
        "campaign_name": stored.campaign_name,
        "catalog_id": stored.catalog_id,
        "model_version": stored.model_version,
        "recommendation": stored.response.get("recommendation"),
        "recommended_option": None if picked is None else picked["option"],
        "programme_total": None if picked is None else picked["programme_total"],
        "currency": stored.response.get("currency"),
        "links": {"self": f"/v1/quotes/{stored.id}"},
    }


@router.get("", response_model=QuotePage, responses=PROBLEM_RESPONSES)
def list_quotes(
    storage: StorageDep,
    viewer: AnyKey,
    team: Annotated[str | None, Query(max_length=100, pattern=PRINTABLE)] = None,
    campaign_name: Annotated[str | None, Query(max_length=200, pattern=PRINTABLE)] = None,
    created_from: Annotated[datetime | None, Query(description="inclusive, ISO 8601"), IsoDateTime, InUtc] = None,
    created_to: Annotated[datetime | None, Query(description="exclusive, ISO 8601"), IsoDateTime, InUtc] = None,
    limit: Annotated[int, Query(ge=1, le=200)] = 50,
    cursor: CursorQuery = None,
) -> dict[str, Any]:
    """Stored quotes, newest first, filtered by team, campaign name and creation time. A requester
    sees its own team's quotes only."""
    items, next_cursor = find_quotes(storage, viewer, team=team, campaign_name=campaign_name,
                                     created_from=created_from, created_to=created_to, limit=limit, cursor=cursor)
    return {"items": [summary(q) for q in items], "next_cursor": next_cursor}


@router.get("/{quote_id}", response_model=QuoteOut | QuoteSummaryView, responses=PROBLEM_RESPONSES)
def read_quote(quote_id: QuoteIdPath, storage: StorageDep, viewer: AnyKey,
               view: ViewQuery = "full") -> FastJSONResponse:
    """One stored quote, exactly as it was returned when created (`?view=summary`: the
    recommendation and one row per option)."""
    return FastJSONResponse(shaped(get_quote(storage, quote_id, viewer).response, view))


@router.get("/{quote_id}/compare/{other_id}", response_model=Comparison, responses=PROBLEM_RESPONSES)
def compare(quote_id: QuoteIdPath, other_id: QuoteIdPath, storage: StorageDep, viewer: AnyKey) -> FastJSONResponse:
    """What changed from one stored quote to another: the recommendation, each option's total, days
    and layout, the break-even rows that moved, the request fields, catalog and model version that
    differ, and (when the catalogs differ) which catalog figures changed."""
    return FastJSONResponse(compare_quotes(storage, quote_id, other_id, viewer))


@router.post("/{quote_id}/requote", status_code=201, response_model=Requoted, dependencies=[JsonBody],
             responses={**PROBLEM_RESPONSES, **MEDIA_TYPE_RESPONSES, **CONFLICT})
async def post_requote(
    quote_id: QuoteIdPath, payload: RequoteIn, raw: RawBodyDep, storage: StorageDep, catalogs: CatalogsDep,
    clock: ClockDep, caller: AnyKey, lane: ComputeLaneDep, idempotency_key: IdempotencyKeyDep = None,
    view: ViewQuery = "full",
) -> Response:
    """Quote a stored quote's request again against another catalog (active and effective today),
    store the new quote, and return it with the comparison from the old quote to the new one."""
    def on_compute_lane() -> Response:
        def create(keep: KeepAnswer | None) -> Created:
            return requote(storage, catalogs, quote_id, payload.catalog_id, clock=clock, caller=caller, keep=keep)

        # The key's fingerprint covers which quote is re-quoted, not only the body naming the catalog.
        fingerprinted = b"requote " + quote_id.encode() + b"\n" + raw
        outcome = once_per_key(storage, caller=caller, key=idempotency_key, body=fingerprinted, clock=clock,
                               create=create)
        new_id = outcome.body["quote"]["id"]
        body = {**outcome.body, "quote": shaped(outcome.body["quote"], view)}
        return created_response(replace(outcome, body=body), location=f"/v1/quotes/{new_id}")

    return await lane.run(on_compute_lane)


@router.get("/{quote_id}/report", response_class=HTMLResponse, responses={
    200: {"content": {"text/html": {}}, "description": "a self-contained, printable HTML page"}, **PROBLEM_RESPONSES})
def quote_report(quote_id: QuoteIdPath, storage: StorageDep, viewer: AnyKey) -> HTMLResponse:
    """The report for people: recommendation, options and cost lines, timing, energy, break-even
    chart, residency screen, assumptions with sources and cautions, from the stored quote alone."""
    return HTMLResponse(render_report(get_quote(storage, quote_id, viewer).response))


@router.get("/{quote_id}/breakeven.svg", response_class=Response, responses={
    200: {"content": {"image/svg+xml": {}}, "description": "the break-even chart"}, **PROBLEM_RESPONSES})
def quote_breakeven_svg(quote_id: QuoteIdPath, storage: StorageDep, viewer: AnyKey) -> Response:
    """Owned cost per used accelerator-hour against utilisation for each owned site, the rented
    prices, and the break-even points (`<g id="breakeven-<site>-<offer>-<term>" data-utilisation>`)."""
    return Response(breakeven_svg(get_quote(storage, quote_id, viewer).response), media_type="image/svg+xml")


@router.get("/{quote_id}/options.csv", response_class=StreamingResponse, responses={
    200: {"content": {"text/csv": {}}, "description": "one row per placement option"}, **PROBLEM_RESPONSES})
def quote_options_csv(quote_id: QuoteIdPath, storage: StorageDep, viewer: AnyKey) -> StreamingResponse:
    """One row per placement option, for spreadsheets (RFC 4180, units in the column names)."""
    document = get_quote(storage, quote_id, viewer).response
    return StreamingResponse(options_csv(document), media_type="text/csv; charset=utf-8",
                             headers={"Content-Disposition": f'attachment; filename="{quote_id}-options.csv"'})


@router.post("/{quote_id}/recompute", response_model=Recomputation, responses=PROBLEM_RESPONSES)
def recompute(quote_id: QuoteIdPath, storage: StorageDep, catalogs: CatalogsDep, viewer: AnyKey) -> dict[str, Any]:
    """Recompute a stored quote from its stored request and catalog under the current model, and
    list every figure that differs (none while the model version is unchanged). Stores nothing."""
    return recompute_quote(storage, catalogs, quote_id, viewer)
