"""Sweeps: bulk what-ifs over a base campaign; small ones answered at once, large ones in the
background with progress; every row as streamed CSV."""

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import Response, StreamingResponse

from service.api.auth import Analyst
from service.api.deps import (
    CatalogsDep,
    ClockDep,
    ComputeLaneDep,
    CursorQuery,
    IdempotencyKeyDep,
    RawBodyDep,
    SettingsDep,
    StorageDep,
    SweepIdPath,
)
from service.api.manners import JsonBody
from service.api.observability import DomainMetrics
from service.api.problems import CONFLICT, MEDIA_TYPE_RESPONSES, PROBLEM_RESPONSES
from service.api.responses import created_response
from service.contract.answers import SweepPage
from service.contract.sweep import SweepIn
from service.usecases.idempotency import Created, KeepAnswer, once_per_key
from service.usecases.stored_sweeps import (
    SweepRunner,
    cancel_sweep,
    find_sweeps,
    get_sweep,
    prepared_from_store,
    submit_sweep,
)
from service.usecases.sweeps import SweepLimits, csv_chunks

router = APIRouter(prefix="/v1/sweeps", tags=["sweeps"])


async def _runner(request: Request) -> SweepRunner:
    runner: SweepRunner = request.app.state.sweeps
    return runner



RunnerDep = Annotated[SweepRunner, Depends(_runner)]


@router.post("", status_code=201, dependencies=[JsonBody],
             responses={202: {"description": "accepted: running in the background"}, **PROBLEM_RESPONSES,
                        **MEDIA_TYPE_RESPONSES, **CONFLICT})
async def post_sweep(request: Request, payload: SweepIn, raw: RawBodyDep, storage: StorageDep, catalogs: CatalogsDep,
                     clock: ClockDep, runner: RunnerDep, settings: SettingsDep, caller: Analyst, lane: ComputeLaneDep,
                     idempotency_key: IdempotencyKeyDep = None) -> Response:
    """Run a sweep: a grid of every combination, or Monte Carlo samples from distributions, over a
    base quote request. Up to `BERTH_SWEEP_ANSWER_AT_ONCE` scenarios the answer comes back at once
    (201); larger sweeps are accepted (202) and report progress at their Location. The same
    Idempotency-Key with the same body returns the first answer."""
    limits = SweepLimits(max_scenarios=settings.sweep_max_scenarios, max_grid_values=settings.sweep_max_grid_values)

    def create(keep: KeepAnswer | None) -> Created:
        created = submit_sweep(storage, catalogs, payload, now=clock(), limits=limits,
                               answer_at_once=settings.sweep_answer_at_once, runner=runner, keep=keep)
        if created.status_code == 201:  # answered at once; a background sweep is counted by its runner
            metrics: DomainMetrics = request.app.state.metrics
            metrics.sweep_scenarios.inc(created.body["progress"]["scenarios_total"])
        return created

    def on_compute_lane() -> Response:
        outcome = once_per_key(storage, caller=caller, key=idempotency_key, body=raw, clock=clock, create=create)
        return created_response(outcome, location=outcome.body["links"]["self"])

    # Answered at once, a sweep is a computation like a quote, and waits its turn on the same lane.
    return await lane.run(on_compute_lane)


@router.get("", response_model=SweepPage, responses=PROBLEM_RESPONSES)
def list_sweeps(storage: StorageDep, _analyst: Analyst, limit: Annotated[int, Query(ge=1, le=200)] = 50,
                cursor: CursorQuery = None) -> dict[str, Any]:
    """Sweeps, newest first: status and progress (the result is at each one's own link)."""
    items, next_cursor = find_sweeps(storage, limit=limit, cursor=cursor)
    return {"items": items, "next_cursor": next_cursor}


@router.get("/{sweep_id}", responses=PROBLEM_RESPONSES)
def read_sweep(sweep_id: SweepIdPath, storage: StorageDep, _analyst: Analyst) -> dict[str, Any]:
    """Status, progress and, once done, the summary, tornado and (for small sweeps) the rows."""
    return get_sweep(storage, sweep_id)


@router.delete("/{sweep_id}", responses={**PROBLEM_RESPONSES, 409: CONFLICT[409] | {
    "description": "the sweep has already finished (done or failed)"}})
def delete_sweep(sweep_id: SweepIdPath, storage: StorageDep, clock: ClockDep, _analyst: Analyst) -> dict[str, Any]:
    """Cancel a queued or running sweep. Its status becomes `cancelled` at once and the scenarios it
    evaluated so far are dropped (`result` stays null; `progress` says how far it got); the process
    running it stops within a heartbeat. Cancelling again answers the same; a finished sweep is a 409."""
    return cancel_sweep(storage, sweep_id, now=clock())


@router.get("/{sweep_id}/rows.csv", response_class=StreamingResponse, responses={
    200: {"content": {"text/csv": {}}, "description": "one row per scenario"}, **PROBLEM_RESPONSES})
def sweep_rows(sweep_id: SweepIdPath, storage: StorageDep, catalogs: CatalogsDep,
               _analyst: Analyst) -> StreamingResponse:
    """Every scenario's inputs, cheapest option and each option's total, streamed as CSV. The rows
    are recomputed from the seeded request, so they are identical every time."""
    prepared = prepared_from_store(storage, catalogs, sweep_id)
    return StreamingResponse(csv_chunks(prepared), media_type="text/csv; charset=utf-8",
                             headers={"Content-Disposition": f'attachment; filename="{sweep_id}.csv"'})
