"""Sweep chunks evaluated on several cores: this process draws the scenarios (so the draws are the
same whatever the number of processes) and worker processes, forked from it (or from a fork server where
it holds threads), evaluate them and send back each chunk's result, or only its tally where the summary is
all that is wanted. They come back in order, and at most two chunks per worker are in flight, so memory
stays bounded at any size. A sweep of enough scenarios uses the compiled pricing and choice
(`domain/compiled.py`)."""

import ctypes
import multiprocessing
import sys
import threading
from collections import deque
from collections.abc import Iterable, Iterator, Mapping
from concurrent.futures import Future, ProcessPoolExecutor
from dataclasses import dataclass
from typing import Any, overload

from service.domain import compiled
from service.domain.arrays import Floats, carrying_infinities
from service.domain.catalog import Catalog
from service.domain.sweep import ChunkResult, ChunkTally, SweepPlan, Tallying, evaluate_chunk

IN_FLIGHT_PER_WORKER = 2
# Scenarios a sweep must price for the compiled kernel to pay for loading it: importing numba and reading
# the kernel from its cache cost 0.27 s, and the kernel saves 2.2 µs a scenario on the demo catalog, 4.9 µs
# on ten venues (bench_sweeps.py section 1). Forked workers share the kernel their parent loaded once
# (`_workers_context`); a process that has it already always uses it.
COMPILED_PAYS_FROM = 125_000


@dataclass(frozen=True)
class _Sweep:
    """What a process evaluating a sweep's chunks keeps for the whole sweep (its tallying keeps the scenarios
    sampled)."""

    catalog: Catalog
    plan: SweepPlan
    kernel: compiled.Kernel | None
    breakeven: bool
    tallying: Tallying | None

    def chunk(self, start: int, inputs: Mapping[str, Floats]) -> ChunkResult | ChunkTally:
        """The chunk whose first scenario is the sweep's `start`th, evaluated, and tallied where asked."""
        result = evaluate(self.catalog, self.plan, inputs, self.kernel, breakeven=self.breakeven)
        return result if self.tallying is None else self.tallying(result, start)


_worker_sweep: _Sweep | None = None


def sweep_kernel(scenarios: int) -> compiled.Kernel | None:
    """The compiled kernel for a process that will price `scenarios` scenarios, where it pays (or
    is loaded already); None for numpy."""
    return compiled.kernel() if compiled.loaded() or scenarios >= COMPILED_PAYS_FROM else None


def evaluate(catalog: Catalog, plan: SweepPlan, inputs: Mapping[str, Floats],
             kernel: compiled.Kernel | None = None, *, breakeven: bool = True) -> ChunkResult:
    with carrying_infinities():
        return evaluate_chunk(catalog, plan, inputs, kernel=kernel, breakeven=breakeven)


@overload
def evaluated(catalog: Catalog, plan: SweepPlan, chunks: Iterable[tuple[int, Mapping[str, Floats]]], *,
              processes: int, breakeven: bool = True, tallying: None = None) -> Iterator[ChunkResult]: ...


@overload
def evaluated(catalog: Catalog, plan: SweepPlan, chunks: Iterable[tuple[int, Mapping[str, Floats]]], *,
              processes: int, breakeven: bool = True, tallying: Tallying) -> Iterator[ChunkTally]: ...


def evaluated(catalog: Catalog, plan: SweepPlan, chunks: Iterable[tuple[int, Mapping[str, Floats]]], *,
              processes: int, breakeven: bool = True,
              tallying: Tallying | None = None) -> Iterator[ChunkResult] | Iterator[ChunkTally]:
    """Each chunk's result, in the order of `chunks` ((first scenario, inputs), as `scenario_chunks` makes
    them), from `processes` worker processes (here, in this process, when it is 1); with its break-even
    utilisations unless `breakeven` is False; reduced to its tally by `tallying` where one is given, in the
    process that evaluated it, so that only the tally is sent back."""
    if processes <= 1:
        return _here(catalog, plan, chunks, breakeven, tallying)
    return _in_workers(catalog, plan, chunks, processes, breakeven, tallying)


def _here(catalog: Catalog, plan: SweepPlan, chunks: Iterable[tuple[int, Mapping[str, Floats]]], breakeven: bool,
          tallying: Tallying | None) -> Iterator[Any]:
    sweep = _Sweep(catalog, plan, sweep_kernel(plan.scenarios), breakeven, tallying)
    for start, inputs in chunks:
        yield sweep.chunk(start, inputs)


def _in_workers(catalog: Catalog, plan: SweepPlan, chunks: Iterable[tuple[int, Mapping[str, Floats]]],
                processes: int, breakeven: bool, tallying: Tallying | None) -> Iterator[Any]:
    context, priced = _workers_context(plan.scenarios, processes)
    if context.get_start_method() == "fork":  # made here, before the workers are forked, so that they share it
        sweep_kernel(priced)  # where the sweep is large enough
        if tallying is not None:
            tallying.share()  # the workers write the values kept into the sample, and send back only counts
    with ProcessPoolExecutor(processes, mp_context=context, initializer=_start_worker,
                             initargs=(catalog, plan, priced, breakeven, tallying)) as pool:
        pending: deque[Future[Any]] = deque()
        for start, inputs in chunks:
            pending.append(pool.submit(_evaluate_in_worker, start, dict(inputs)))
            if len(pending) >= IN_FLIGHT_PER_WORKER * processes:
                yield pending.popleft().result()
        while pending:
            yield pending.popleft().result()


def _workers_context(scenarios: int, processes: int) -> tuple[multiprocessing.context.BaseContext, int]:
    """How the workers of a sweep of `scenarios` start, and how many scenarios each may price (what
    `sweep_kernel` weighs).

    - Forked from this process, on Linux, where it holds no thread but its main one (a command line's sweep):
      the workers share what it imported, and the compiled kernel, which `_in_workers` loads first where the
      sweep is large enough. A 1,000,000-scenario sweep on ten venues took 0.7 s less CPU this way than with a
      fork server, which starts an interpreter and imports numpy, the domain and numba once more
      (bench_sweeps.py 2a).
      The pool forks every worker at its first task, before it starts a thread of its own.
    - From a fork server where this process holds threads (a fork copies no thread but the caller's, and a
      lock another thread held stays locked in the copy): the server is started clean and imports the sweep's
      modules once, with the kernel where the workers will use it (`kernel_preload`), so that no worker
      imports numpy, the domain and numba afresh (0.4 s each for the imports, 0.3 s more for the kernel). The
      server is this process's, started by its first pool with the modules that pool asked for.
    - Started afresh where a platform has neither; each loads the kernel for its own share."""
    methods = multiprocessing.get_all_start_methods()
    if sys.platform == "linux" and "fork" in methods and threading.active_count() == 1:
        return multiprocessing.get_context("fork"), scenarios
    if "forkserver" in methods:
        context = multiprocessing.get_context("forkserver")
        kernel = ["service.usecases.kernel_preload"] if scenarios >= COMPILED_PAYS_FROM else []
        context.set_forkserver_preload([__name__, *kernel])
        return context, scenarios
    return multiprocessing.get_context("spawn"), -(-scenarios // processes)


def _start_worker(catalog: Catalog, plan: SweepPlan, priced: int, breakeven: bool,
                  tallying: Tallying | None) -> None:
    global _worker_sweep
    _worker_sweep = _Sweep(catalog, plan, sweep_kernel(priced), breakeven, tallying)
    keep_freed_arrays()


# glibc's mallopt parameters (malloc.h): M_TRIM_THRESHOLD and M_MMAP_THRESHOLD.
_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3
_MMAP_THRESHOLD_BYTES = 32 * 2**20  # the largest glibc accepts on 64-bit
_TRIM_THRESHOLD_BYTES = 512 * 2**20


def keep_freed_arrays() -> bool:
    """Let this process reuse the memory of the large arrays it frees instead of handing it back to
    the system and faulting fresh pages in for the next one. A worker allocates and frees arrays of
    ~10 MB all the time: by default glibc maps each one afresh, and in a 1,000,000-scenario sweep
    that was ~1.9 million page faults and a fifth of the CPU time (measured with /usr/bin/time).
    Arrays up to 32 MB now come from the heap, and up to 512 MB of freed heap is kept: a chunk priced
    in numpy alone (no compiled kernel) on ten venues grows the heap to 370 MB and frees most of it, and
    at 256 MB kept the heap was handed back and faulted in again at every chunk (a quarter of such a
    sweep's CPU, 0.3 s of system time per 100,000 scenarios). A process's peak is the same either way.
    Only on glibc; elsewhere nothing changes. Returns whether the setting took."""
    try:
        libc = ctypes.CDLL("libc.so.6")
        return bool(libc.mallopt(_M_MMAP_THRESHOLD, _MMAP_THRESHOLD_BYTES)
                    and libc.mallopt(_M_TRIM_THRESHOLD, _TRIM_THRESHOLD_BYTES))
    except (OSError, AttributeError):
        return False


def _evaluate_in_worker(start: int, inputs: dict[str, Floats]) -> ChunkResult | ChunkTally:
    assert _worker_sweep is not None, "the pool's initializer sets the sweep"
    return _worker_sweep.chunk(start, inputs)
