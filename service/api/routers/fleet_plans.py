"""Fleet plans: size an owned fleet against a demand forecast over a horizon, the overflow rented."""

from typing import Annotated, Any

from fastapi import APIRouter, Query, Request
from fastapi.responses import HTMLResponse, Response

from service.api.auth import Analyst
from service.api.deps import (
    CatalogsDep,
    ClockDep,
    ComputeLaneDep,
    CursorQuery,
    IdempotencyKeyDep,
    PlanIdPath,
    RawBodyDep,
    SettingsDep,
    StorageDep,
)
from service.api.manners import JsonBody
from service.api.observability import DomainMetrics
from service.api.problems import CONFLICT, MEDIA_TYPE_RESPONSES, PROBLEM_RESPONSES
from service.api.responses import created_response
from service.contract.answers import FleetPlanOut, FleetPlanPage
from service.contract.fleet import FleetPlanIn
from service.reports.fleet_chart import fleet_figure_svg
from service.reports.html import render_plan
from service.reports.svg import standalone
from service.usecases.fleet_plans import FleetLimits, create_fleet_plan, find_fleet_plans, get_fleet_plan
from service.usecases.idempotency import Created, KeepAnswer, once_per_key

router = APIRouter(prefix="/v1/fleet-plans", tags=["fleet plans"])





@router.post("", status_code=201, dependencies=[JsonBody],
             responses={201: {"model": FleetPlanOut, "description": "the stored plan"},
                        **PROBLEM_RESPONSES, **MEDIA_TYPE_RESPONSES, **CONFLICT})
async def post_fleet_plan(request: Request, payload: FleetPlanIn, raw: RawBodyDep, storage: StorageDep,
                          catalogs: CatalogsDep, clock: ClockDep, settings: SettingsDep, caller: Analyst,
                          lane: ComputeLaneDep, idempotency_key: IdempotencyKeyDep = None) -> Response:
    """The staged plan from the site's nodes owned today: the fleet at each decision point
    (`decision_every_months`) with the lowest expected present cost, found by dynamic programming, its
    cash flow by year and months; beside it one purchase now, and every candidate size against every
    demand sample. The same Idempotency-Key with the same body returns the first answer."""
    def create(keep: KeepAnswer | None) -> Created:
        limits = FleetLimits(max_cells=settings.fleet_max_cells, max_candidates=settings.fleet_max_candidates)
        created = create_fleet_plan(storage, catalogs, payload, now=clock(), limits=limits, keep=keep)
        metrics: DomainMetrics = request.app.state.metrics
        metrics.fleet_plans.inc()
        return created

    def on_compute_lane() -> Response:
        outcome = once_per_key(storage, caller=caller, key=idempotency_key, body=raw, clock=clock, create=create)
        return created_response(outcome, location=outcome.body["links"]["self"])

    return await lane.run(on_compute_lane)


@router.get("", response_model=FleetPlanPage, responses=PROBLEM_RESPONSES)
def list_fleet_plans(storage: StorageDep, _analyst: Analyst, limit: Annotated[int, Query(ge=1, le=200)] = 50,
                     cursor: CursorQuery = None) -> dict[str, Any]:
    """Fleet plans, newest first: site, offer, term and the best size of each."""
    items, next_cursor = find_fleet_plans(storage, limit=limit, cursor=cursor)
    return {"items": items, "next_cursor": next_cursor}


@router.get("/{plan_id}/chart.svg", response_class=Response, responses={
    200: {"content": {"image/svg+xml": {}}, "description": "present cost by size; the staged plan by month"},
    **PROBLEM_RESPONSES})
def fleet_plan_chart(plan_id: PlanIdPath, storage: StorageDep, _analyst: Analyst) -> Response:
    """Present cost against owned fleet size (median and 5th-95th percentile band), and the staged
    plan's owned hours against expected demand month by month."""
    return Response(standalone(fleet_figure_svg(get_fleet_plan(storage, plan_id))), media_type="image/svg+xml")


@router.get("/{plan_id}/report", response_class=HTMLResponse, responses={
    200: {"content": {"text/html": {}}, "description": "a printable page"}, **PROBLEM_RESPONSES})
def fleet_plan_report(plan_id: PlanIdPath, storage: StorageDep, _analyst: Analyst) -> HTMLResponse:
    """The plan as a self-contained, printable page."""
    return HTMLResponse(render_plan(get_fleet_plan(storage, plan_id)))


@router.get("/{plan_id}", responses={200: {"model": FleetPlanOut, "description": "the plan as it was returned"},
                                     **PROBLEM_RESPONSES})
def read_fleet_plan(plan_id: PlanIdPath, storage: StorageDep, _analyst: Analyst) -> dict[str, Any]:
    """A stored fleet plan, as it was returned."""
    return get_fleet_plan(storage, plan_id)
