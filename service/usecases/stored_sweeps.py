"""Use cases for stored sweeps: submitted over HTTP, small ones answered at once, large ones queued and
run in the background by a `SweepRunner` (one per process, claiming sweeps from the shared storage), with
their status, listing and cancellation. The sweep itself is planned and run by `usecases/sweeps.py`, which
`berth sweep` uses alone, without the storage."""

import logging
import threading
from collections.abc import Callable
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

from service.contract.sweep import SweepIn
from service.errors import Conflict, NotFound
from service.storage.repository import Storage, StoredSweep, new_id
from service.usecases.catalogs import ParsedCatalogs, catalog_to_use
from service.usecases.chunk_pool import keep_freed_arrays
from service.usecases.idempotency import Created, KeepAnswer
from service.usecases.liveness import dead_here, this_process
from service.usecases.sweeps import PreparedSweep, SweepLimits, prepare_sweep, run, sweep_document, tornado_bars

log = logging.getLogger("berth.sweeps")


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
                # workers: keep that memory rather than fault it in afresh (as far as keep_freed_arrays says).
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
