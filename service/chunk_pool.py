"""Sweep chunks evaluated on several cores: this process draws the scenarios (so the draws are the
same whatever the number of processes) and worker processes evaluate them. Results come back in
order, and at most two chunks per worker are in flight, so memory stays bounded at any size."""

import multiprocessing
from collections import deque
from collections.abc import Iterable, Iterator, Mapping
from concurrent.futures import Future, ProcessPoolExecutor

import numpy as np

from service.domain.arrays import Floats
from service.domain.catalog import Catalog
from service.domain.sweep import ChunkResult, SweepPlan, evaluate_chunk

IN_FLIGHT_PER_WORKER = 2

_worker_sweep: tuple[Catalog, SweepPlan] | None = None


def evaluate(catalog: Catalog, plan: SweepPlan, inputs: Mapping[str, Floats]) -> ChunkResult:
    # Extreme but valid figures make infinite times, which the model screens out; numpy's
    # warnings about them would only be noise (as in quoting.quote).
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        return evaluate_chunk(catalog, plan, inputs)


def evaluated(catalog: Catalog, plan: SweepPlan, chunks: Iterable[Mapping[str, Floats]], *,
              processes: int) -> Iterator[ChunkResult]:
    """Each chunk's result, in the order of `chunks`, from `processes` worker processes (here, in
    this process, when it is 1)."""
    if processes <= 1:
        for inputs in chunks:
            yield evaluate(catalog, plan, inputs)
        return
    # "spawn": a worker starts clean rather than as a copy of a process that may hold threads.
    with ProcessPoolExecutor(processes, mp_context=multiprocessing.get_context("spawn"),
                             initializer=_start_worker, initargs=(catalog, plan)) as pool:
        pending: deque[Future[ChunkResult]] = deque()
        for inputs in chunks:
            pending.append(pool.submit(_evaluate_in_worker, dict(inputs)))
            if len(pending) >= IN_FLIGHT_PER_WORKER * processes:
                yield pending.popleft().result()
        while pending:
            yield pending.popleft().result()


def _start_worker(catalog: Catalog, plan: SweepPlan) -> None:
    global _worker_sweep
    _worker_sweep = catalog, plan


def _evaluate_in_worker(inputs: dict[str, Floats]) -> ChunkResult:
    assert _worker_sweep is not None, "the pool's initializer sets the sweep"
    catalog, plan = _worker_sweep
    return evaluate(catalog, plan, inputs)
