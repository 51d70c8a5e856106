"""Use cases for sweeps: check a sweep request against a catalog and the limits, plan it, run it
in chunks with progress, and shape its summary, tornado and rows (JSON and streamed CSV)."""

import csv
import io
import logging
import threading
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

import numpy as np

from service.contract.catalog import CatalogIn
from service.contract.document import Money
from service.contract.sweep import DistributionIn, SweepIn
from service.domain.catalog import Catalog
from service.domain.explain import CAUTIONS
from service.domain.sweep import ChunkResult, SweepPlan, SweepSummary, chunk_size, scenario_chunks, tornado
from service.domain.whatif import InputPath, UnknownPath, apply, base_value, input_path, venue_of
from service.errors import Conflict, FieldProblem, InvalidInput, NotFound
from service.storage.repository import Storage, StoredSweep, new_id
from service.usecases.catalogs import ParsedCatalogs, catalog_to_use
from service.usecases.chunk_pool import evaluated, keep_freed_arrays
from service.usecases.idempotency import Created, KeepAnswer
from service.usecases.liveness import dead_here, this_process
from service.usecases.quoting import request_problems, unknown_venue

log = logging.getLogger("berth.sweeps")

ROWS_IN_JSON = 10_000


@dataclass(frozen=True)
class SweepLimits:
    max_scenarios: int = 10_000_000
    max_grid_values: int = 10_000  # per path
    max_paths: int = 20


@dataclass(frozen=True)
class PreparedSweep:
    catalog: Catalog
    plan: SweepPlan
    request: SweepIn
    currency: str
    units: dict[str, str]


def prepare_sweep(catalog_in: CatalogIn, sweep: SweepIn, limits: SweepLimits) -> PreparedSweep:
    """Check everything a sweep needs before a scenario runs; every problem names its field."""
    problems = [FieldProblem(f"base.{p.field}", p.reason) for p in request_problems(catalog_in, sweep.base)]
    campaign, options, overrides = sweep.base.to_domain()
    varied: dict[str, Any] = dict(sweep.grid or sweep.distributions or {})
    where = "grid" if sweep.grid is not None else "distributions"
    if len(varied) > limits.max_paths:
        problems.append(FieldProblem(where, f"at most {limits.max_paths} inputs may vary in one sweep"))
    for path, spec in varied.items():
        field = f"{where}.{path}"
        try:
            rule, _ = input_path(path)
        except UnknownPath as error:
            problems.append(FieldProblem(field, str(error)))
            continue
        venue = venue_of(path)
        if venue is not None and (reason := unknown_venue(catalog_in, *venue[:2])) is not None:
            problems.append(FieldProblem(field, reason))
            continue
        try:
            apply(campaign, overrides, {path: np.ones(1)})
        except LookupError as error:
            problems.append(FieldProblem(field, str(error)))
            continue
        if isinstance(spec, DistributionIn):
            reason = _support_problem(rule, spec)
        else:
            if len(spec) > limits.max_grid_values:
                problems.append(FieldProblem(field, f"at most {limits.max_grid_values:,} values per path"))
            reason = rule.problems(np.asarray(spec, dtype=np.float64))
        if reason:
            problems.append(FieldProblem(field, reason))
    plan = SweepPlan(
        campaign=campaign, options=options, overrides=overrides,
        grid={p: np.asarray(v, dtype=np.float64) for p, v in (sweep.grid or {}).items()},
        distributions={p: d.to_domain() for p, d in (sweep.distributions or {}).items()},
        samples=sweep.samples or 0, seed=sweep.seed)
    if not problems and plan.scenarios > limits.max_scenarios:
        problems.append(FieldProblem("samples" if sweep.samples else "grid",
                                     f"{plan.scenarios:,} scenarios exceed the limit of {limits.max_scenarios:,} "
                                     "per sweep"))
    if problems:
        raise InvalidInput("the sweep cannot run as asked", problems)
    units = {path: input_path(path)[0].unit.replace("currency", catalog_in.currency) for path in plan.paths}
    return PreparedSweep(catalog_in.to_domain(), plan, sweep, catalog_in.currency, units)


def _support_problem(rule: InputPath, spec: DistributionIn) -> str | None:
    """Whether every value the distribution can draw is valid for the path."""
    if rule.integer and spec.kind != "choice":
        return f"takes whole numbers; a {spec.kind} distribution draws fractions (use a choice distribution)"
    if spec.kind == "choice":
        return rule.problems(np.asarray(spec.values, dtype=np.float64))
    # An unbounded tail is judged by where it reaches with any chance that matters: 12 standard
    # deviations (a chance below 1e-32 per draw) stand in for infinity against a finite ceiling.
    if spec.kind == "lognormal":
        lowest, highest = 0.0, float(np.exp(min((spec.mean or 0.0) + TAIL_SIGMAS * (spec.sigma or 0.0), 709.0)))
        open_low = True
    elif spec.kind == "normal":
        reach = TAIL_SIGMAS * (spec.sd or 0.0)
        lowest = -np.inf if spec.low is None else spec.low
        highest = (spec.mean or 0.0) + reach if spec.high is None else spec.high
        open_low = False
    else:
        lowest, highest, open_low = float(spec.low or 0.0), float(spec.high or 0.0), False
    below = lowest < rule.low or (lowest == rule.low and rule.low_open and not open_low)
    if below or highest > rule.high:
        bound = f"{'>' if rule.low_open else '≥'} {rule.low:g}" + (
            f" and ≤ {rule.high:g}" if np.isfinite(rule.high) else "")
        hint = " (give low/high bounds to a normal distribution)" if spec.kind == "normal" else ""
        return f"this {spec.kind} distribution can draw values outside the valid range ({bound}){hint}"
    return None


TAIL_SIGMAS = 12.0

Progress = Callable[[int, int], None]


def run(prepared: PreparedSweep, *, keep_rows: int = ROWS_IN_JSON, progress: Progress | None = None,
        processes: int = 1) -> tuple[dict[str, Any], list[dict[str, Any]]]:
    """Evaluate every scenario in chunks: the summary, and the first `keep_rows` rows as JSON."""
    summary = SweepSummary(seed=prepared.plan.seed)
    rows: list[dict[str, Any]] = []
    money = Money(prepared.currency)
    total = prepared.plan.scenarios
    for chunk in _chunks(prepared, processes):
        summary.add(chunk)
        if len(rows) < keep_rows and total <= keep_rows:
            rows.extend(_json_rows(chunk, money))
        if progress is not None:
            progress(summary.scenarios, total)
    result = summary.result()
    result["currency"] = prepared.currency
    for option in result["options"]:  # type: ignore[attr-defined]
        for key in ("total_p5", "total_p50", "total_p95"):
            option[key] = None if option[key] is None else money(option[key])
    for row in result["breakeven_utilisation"]:  # type: ignore[attr-defined]
        for key in ("utilisation_p5", "utilisation_p50", "utilisation_p95"):
            row[key] = None if row[key] is None else round(row[key], 4)  # as a quote gives utilisation
    return result, rows


def _chunks(prepared: PreparedSweep, processes: int, *, breakeven: bool = True) -> Iterator[ChunkResult]:
    plan = prepared.plan
    size = chunk_size(prepared.catalog, plan.paths)
    inputs = (values for _, values in scenario_chunks(plan, size))
    # A sweep of one chunk gains nothing from starting worker processes.
    yield from evaluated(prepared.catalog, plan, inputs, processes=processes if plan.scenarios > size else 1,
                         breakeven=breakeven)


def _json_rows(chunk: Any, money: Money) -> list[dict[str, Any]]:
    paths = list(chunk.inputs)
    rows = []
    for s in range(chunk.size):
        pick = int(chunk.cheapest[s])
        rows.append({
            "inputs": {p: float(chunk.inputs[p][s]) for p in paths},
            "cheapest": None if pick < 0 else chunk.labels[pick],
            "totals": {label: money(chunk.totals[k, s]) for k, label in enumerate(chunk.labels)},
            "currency": money.currency,
        })
    return rows


def tornado_bars(prepared: PreparedSweep) -> list[dict[str, Any]] | None:
    """Tornado over every varied input, centred on the base request's value where it has one,
    else on the grid's middle value or the distribution's median."""
    if prepared.request.tornado is None:
        return None
    plan = prepared.plan
    centres: dict[str, float] = {}
    for path in plan.paths:
        value = base_value(plan.campaign, plan.overrides, path)
        if value is None:
            value = float(np.median(plan.grid[path])) if plan.grid else plan.distributions[path].centre()
        centres[path] = value
    ranges = {path: _closed_range(input_path(path)[0]) for path in plan.paths}
    money = Money(prepared.currency)
    bars = tornado(prepared.catalog, plan, centres, ranges, prepared.request.tornado.swing)
    return [{"input": bar.path, "centre": bar.centre, "low": bar.low, "high": bar.high,
             "gap_at_low": money(bar.gap_low), "gap_at_high": money(bar.gap_high),
             "gap_at_centre": money(bar.gap_centre), "effect": money(bar.effect), "currency": prepared.currency}
            for bar in bars]


def _closed_range(rule: InputPath) -> tuple[float, float]:
    low = np.nextafter(rule.low, np.inf) if rule.low_open else rule.low
    return float(low), float(rule.high)


def sweep_document(prepared: PreparedSweep, summary: dict[str, Any], rows: list[dict[str, Any]],
                   bars: list[dict[str, Any]] | None) -> dict[str, Any]:
    """The sweep's answer (api.md): scenarios, summary, tornado, and the rows when there are few."""
    scenarios = prepared.plan.scenarios
    included = scenarios <= ROWS_IN_JSON
    return {
        "scenarios": scenarios,
        "currency": prepared.currency,
        "varied": [{"path": p, "unit": prepared.units[p]} for p in prepared.plan.paths],
        "summary": summary,
        "tornado": bars,
        "rows_included": included,
        "rows": rows if included else None,
        "cautions": list(CAUTIONS),
    }


def csv_header(prepared: PreparedSweep, labels: list[str]) -> list[str]:
    return (["scenario"] + [f"{p} [{prepared.units[p]}]" for p in prepared.plan.paths] + ["cheapest", "currency"]
            + [f"{label} total" for label in labels] + ["cautions"])


def _quoted(text: str) -> str:
    return '"' + text.replace('"', '""') + '"'


CSV_CAUTIONS = _quoted(" ".join(CAUTIONS))
CSV_ROWS = 5_000  # rows formatted at once: numpy's text arrays of a whole chunk took the writer 100 MB more


def csv_chunks(prepared: PreparedSweep, progress: Progress | None = None, processes: int = 1) -> Iterator[str]:
    """Every scenario as CSV (RFC 4180), CSV_ROWS at a time: bounded memory at any size. Columns are
    formatted by numpy as whole arrays; no Python loop runs per scenario. The cautions are the last
    column of the first row (empty below it, which keeps millions of rows small): a spreadsheet shows
    them at the top, and a reader that takes the first row as the header reads every row."""
    first = 0
    for chunk in _chunks(prepared, processes, breakeven=False):  # rows have no break-even column
        for start in range(0, chunk.size, CSV_ROWS):
            part = slice(start, min(start + CSV_ROWS, chunk.size))
            yield _csv_rows(prepared, chunk, part, first)
            first += part.stop - part.start
        if progress is not None:
            progress(first, prepared.plan.scenarios)


def _csv_rows(prepared: PreparedSweep, chunk: ChunkResult, part: slice, first: int) -> str:
    """The rows `part` of a chunk as CSV, numbered from `first`; the header and the cautions with row 0."""
    head = ""
    if first == 0:
        buffer = io.StringIO()
        csv.writer(buffer, lineterminator="\r\n").writerow(csv_header(prepared, chunk.labels))
        head = buffer.getvalue()
    picked = chunk.cheapest[part]
    labels = np.asarray([*chunk.labels, ""], dtype=object)
    columns = [np.arange(first, first + picked.size).astype(str)]
    columns += [_decimals(chunk.inputs[p][part]) for p in prepared.plan.paths]
    columns += [labels[np.where(picked >= 0, picked, len(chunk.labels))].astype(str),
                np.full(picked.size, prepared.currency)]
    digits = Money(prepared.currency).digits
    columns += [_decimals(np.round(totals[part], digits)) for totals in chunk.totals]
    lines = columns[0]
    for column in columns[1:]:
        lines = np.char.add(np.char.add(lines, ","), column)
    # The cautions column: empty, and the cautions written onto the first row alone (an array as wide as
    # them for every row cost a chunk of 25,000 rows over 100 MB).
    rows = np.char.add(lines, ",").tolist()
    if first == 0:
        rows[0] += CSV_CAUTIONS
    return head + "\r\n".join(rows) + "\r\n"


def _decimals(values: np.ndarray) -> np.ndarray:
    """Plain decimals for spreadsheets (no exponent), empty where a value is missing."""
    values = np.asarray(values, dtype=np.float64)
    finite = np.isfinite(values)
    text = np.char.mod("%.15g", np.where(finite, values, 0.0))
    # %g switches to an exponent for large or tiny numbers; write those in full.
    exponent = np.char.find(text, "e") >= 0
    if exponent.any():
        text = np.where(exponent, np.char.mod("%.6f", np.where(finite, values, 0.0)), text)
    return np.where(finite, text, "")


# Stored sweeps: submitted over HTTP, small ones answered at once, large ones run in the background.

def submit_sweep(storage: Storage, catalogs: ParsedCatalogs, sweep: SweepIn, *, now: datetime, limits: SweepLimits,
                 answer_at_once: int, runner: "SweepRunner", keep: KeepAnswer | None = None) -> Created:
    """Check and store a sweep. Up to `answer_at_once` scenarios it runs now (201 with the answer);
    beyond, it is queued (202) and its progress is at GET /v1/sweeps/{id}. `keep` (from
    `once_per_key`) is given the answer in the transaction that stores the sweep."""
    stored_catalog = catalog_to_use(storage, sweep.base.catalog_id, field="base.catalog_id", on=now.date())
    prepared = prepare_sweep(catalogs.get(stored_catalog, storage), sweep, limits)
    sweep_id = new_id("sw")
    total = prepared.plan.scenarios
    at_once = total <= answer_at_once
    document = None
    if at_once:
        summary, rows = run(prepared)
        document = sweep_document(prepared, summary, rows, tornado_bars(prepared))
    status_code = 201 if at_once else 202
    with storage.writing() as repository:
        repository.add_sweep(sweep_id=sweep_id, created_at=now, catalog_id=stored_catalog.id,
                             status="done" if at_once else "queued", total=total,
                             request=sweep.model_dump(mode="json"), result=document)
        stored = repository.sweep(sweep_id)
        assert stored is not None  # just written, in this transaction
        body = status_body(stored)
        if keep is not None:
            keep(repository, status_code, body)
    if not at_once:
        runner.wake()
    return Created(status_code, body)


def _stored(storage: Storage, sweep_id: str) -> StoredSweep:
    with storage.reading() as repository:
        stored = repository.sweep(sweep_id)
    if stored is None:
        raise NotFound(f"no sweep {sweep_id!r}")
    return stored


def status_body(stored: StoredSweep) -> dict[str, Any]:
    return {
        "id": stored.id,
        "status": stored.status,
        "created_at": stored.created_at.isoformat().replace("+00:00", "Z"),
        "finished_at": None if stored.finished_at is None else stored.finished_at.isoformat().replace("+00:00", "Z"),
        "catalog_id": stored.catalog_id,
        "progress": {"scenarios_done": stored.scenarios_done, "scenarios_total": stored.scenarios_total},
        "error": stored.error,
        "result": stored.result,
        "links": {"self": f"/v1/sweeps/{stored.id}", "rows_csv": f"/v1/sweeps/{stored.id}/rows.csv"},
    }


def get_sweep(storage: Storage, sweep_id: str) -> dict[str, Any]:
    return status_body(_stored(storage, sweep_id))


def find_sweeps(storage: Storage, *, limit: int, cursor: str | None) -> tuple[list[dict[str, Any]], str | None]:
    """A page of sweeps, newest first: each one's status wrapper without its result."""
    with storage.reading() as repository:
        items, next_cursor = repository.sweeps(limit=limit, cursor=cursor)
    listed = [{k: v for k, v in status_body(s).items() if k not in ("result", "error")} for s in items]
    return listed, next_cursor


def prepared_from_store(storage: Storage, catalogs: ParsedCatalogs, sweep_id: str) -> PreparedSweep:
    stored = _stored(storage, sweep_id)
    with storage.reading() as repository:
        catalog = repository.catalog_ref(stored.catalog_id)
    if catalog is None:
        raise NotFound(f"the catalog of sweep {sweep_id!r} is gone")
    return prepare_sweep(catalogs.get(catalog, storage), SweepIn.model_validate(stored.request),
                         SweepLimits(max_scenarios=stored.scenarios_total))


def cancel_sweep(storage: Storage, sweep_id: str, *, now: datetime) -> dict[str, Any]:
    """Cancel a queued or running sweep: its status becomes `cancelled` at once, and the scenarios it
    evaluated so far are dropped (a partial summary would read as the answer; `scenarios_done` says
    how far it got). The process running it stops at its next chunk or heartbeat. Cancelling a
    cancelled sweep answers the same; a finished one cannot be cancelled."""
    with storage.writing() as repository:
        repository.cancel_sweep(sweep_id, now=now)
        stored = repository.sweep(sweep_id)
    if stored is None:
        raise NotFound(f"no sweep {sweep_id!r}")
    if stored.status in ("done", "failed"):
        raise Conflict(f"sweep {sweep_id!r} has already finished ({stored.status}); there is nothing to cancel")
    return status_body(stored)


class _Stopped(Exception):
    """The sweep is no longer this process's to run: cancelled, taken over, or handed back."""


@dataclass(frozen=True)
class RunnerTiming:
    heartbeat_seconds: float = 5.0  # how often a running sweep's runner says it is alive
    stale_after_seconds: float = 15.0  # a running sweep with no heartbeat for this long is taken over
    stop_wait_seconds: float = 10.0  # how long `shutdown` waits for the runner's thread to stop


class SweepRunner:
    """Runs sweeps in the background, one at a time per process, on a thread of its own.

    Any process may run any queued sweep: the runner claims one atomically, beats a heartbeat while it
    runs it (a thread of its own, so a long chunk does not look like death), and looks for work every
    heartbeat: sweeps queued by any replica, sweeps whose runner stopped beating (taken over after
    `stale_after_seconds`), and sweeps whose runner was a process on this host that is gone (taken
    over at once, so a restart resumes them without waiting). `shutdown` (SIGTERM) hands the running
    sweep back to the queue. `count_scenarios` is told how many scenarios each finished sweep
    evaluated (the HTTP layer hands in its metrics counter; use cases never import it)."""

    def __init__(self, storage: Storage, catalogs: ParsedCatalogs, clock: Callable[[], datetime], *,
                 count_scenarios: Callable[[int], None] = lambda _scenarios: None,
                 timing: RunnerTiming = RunnerTiming()) -> None:
        self._storage, self._catalogs, self._clock = storage, catalogs, clock
        self._count_scenarios = count_scenarios
        self._timing = timing
        self._stale_after = timedelta(seconds=timing.stale_after_seconds)
        self._wake = threading.Event()
        self._stopping = threading.Event()
        self._lost = threading.Event()  # the running sweep is no longer ours
        self._lock = threading.Lock()
        self._thread: threading.Thread | None = None
        self._running: str | None = None
        self.runner = this_process()

    def wake(self) -> None:
        """A sweep was queued: look for work now rather than at the next heartbeat (the oldest
        claimable sweep runs first, whichever process queued it)."""
        self._start()
        self._wake.set()

    def resume(self) -> int:
        """Start looking for work; the number of unfinished sweeps this process could take up now."""
        self._start()
        return len(self._claimable())

    def shutdown(self) -> None:
        """Stop looking for work and hand the running sweep back to the queue, for a replica or the
        next start of this one; its thread stops at its next chunk without writing. Then wait for the
        thread (at most `stop_wait_seconds`), so that no query of its is in flight when the storage is
        closed: a connection checked in after `Storage.dispose` would stay open until collected."""
        self._stopping.set()
        self._wake.set()
        with self._lock:
            running, thread = self._running, self._thread
            self._running = None
        if running is not None:
            self._lost.set()
            with self._storage.writing() as repository:
                if repository.hand_back_sweep(running, runner=self.runner):
                    log.info("handed sweep %s back to the queue", running)
        if thread is not None and thread is not threading.current_thread():
            thread.join(self._timing.stop_wait_seconds)

    def _start(self) -> None:
        with self._lock:
            if self._thread is None and not self._stopping.is_set():
                # The service's sweeps allocate and free the same large arrays as the command line's
                # workers: keep that memory rather than fault it in afresh (at most 256 MB kept freed).
                keep_freed_arrays()
                self._thread = threading.Thread(target=self._loop, name="sweeps", daemon=True)
                self._thread.start()

    def _claimable(self) -> list[tuple[str, str | None]]:
        """(id, runner) of each sweep this process may take up now, oldest first."""
        now = self._clock()
        with self._storage.reading() as repository:
            unfinished = repository.unfinished_sweeps()
        return [(sweep_id, runner) for sweep_id, status, runner, beat in unfinished
                if status == "queued" or beat is None or beat < now - self._stale_after or dead_here(runner)]

    def _loop(self) -> None:
        while not (self._stopping.is_set() or self._storage.closed):
            self._wake.clear()
            try:
                ran = self._run_one()
            except Exception:  # the database is away, say: look again at the next heartbeat
                if self._storage.closed:
                    return
                log.exception("looking for sweeps to run failed")
                ran = False
            if not ran:
                self._wake.wait(self._timing.heartbeat_seconds)

    def _run_one(self) -> bool:
        """Claim and run the oldest claimable sweep; False when there was none."""
        for sweep_id, runner in self._claimable():
            if self._stopping.is_set():
                return False
            dead = [runner] if runner is not None and dead_here(runner) else []
            with self._storage.writing() as repository:
                claimed = repository.claim_sweep(sweep_id, runner=self.runner, now=self._clock(),
                                                 stale_after=self._stale_after, dead_runners=dead)
            if claimed:
                self._run(sweep_id)
                return True
        return False

    def _run(self, sweep_id: str) -> None:
        with self._lock:
            if self._stopping.is_set():
                return
            self._running = sweep_id
            self._lost.clear()
        done = [0]
        beating = threading.Event()

        def heartbeat() -> None:
            while not beating.wait(self._timing.heartbeat_seconds):
                try:
                    with self._storage.writing() as repository:
                        ours = repository.beat_sweep(sweep_id, runner=self.runner, now=self._clock(), done=done[0])
                except Exception:  # a missed beat: the next one may get through
                    log.exception("heartbeat of sweep %s failed", sweep_id)
                    continue
                if not ours:
                    self._lost.set()
                    return

        def progress(scenarios: int, _total: int) -> None:
            done[0] = scenarios
            if self._lost.is_set():
                raise _Stopped

        beat = threading.Thread(target=heartbeat, name=f"heartbeat-{sweep_id}", daemon=True)
        beat.start()
        try:
            prepared = prepared_from_store(self._storage, self._catalogs, sweep_id)
            summary, rows = run(prepared, progress=progress)
            document = sweep_document(prepared, summary, rows, tornado_bars(prepared))
            with self._storage.writing() as repository:
                finished = repository.finish_sweep(sweep_id, runner=self.runner, status="done",
                                                   done=prepared.plan.scenarios, result=document,
                                                   finished_at=self._clock())
            if finished:
                self._count_scenarios(prepared.plan.scenarios)
        except _Stopped:
            log.info("sweep %s stopped: cancelled, taken over or handed back", sweep_id)
        except Exception as error:  # a sweep that fails says why; the service goes on
            log.exception("sweep %s failed", sweep_id)
            with self._storage.writing() as repository:
                repository.finish_sweep(sweep_id, runner=self.runner, status="failed", done=done[0],
                                        error=f"{type(error).__name__}: {error}", finished_at=self._clock())
        finally:
            beating.set()
            with self._lock:
                if self._running == sweep_id:
                    self._running = None
