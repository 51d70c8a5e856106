"""The layout search's pricing and choice compiled with numba, where a sweep pays for it.

Choosing a term's layout prices every candidate in every scenario and keeps the cheapest that
meets the deadline (`choice.choose` over `charges.Charges.cost`). In numpy that is several
whole-grid passes per term, each writing an (S, K) array, then a masked copy and an argmin: about
30% of a sweep's time. Here each block of candidates is priced and compared in one pass, a cell at
a time, and nothing is written but each scenario's running least.

The numpy path is the reference, and the kernel is a dependency its callers pass in (`kernel()`),
or not: a quote never does, so it never imports numba; a sweep does where importing numba (0.2 s)
and reading the kernel from numba's cache (0.1 s) pay for themselves (`usecases/chunk_pool.py`);
where numba is missing, `kernel()` is None and sweeps run numpy.

The kernel's formulas are those of `terms.py` (`chargeback_cost`, `new_build_share` and
`new_build_cost`, `hourly_lines`, `committed_share` and `committed_lines`, `storage_cost`) and
`recurrence.instances_sharing`, written for one cell, operation for operation in numpy's order and
with numpy's rules for NaN and division by zero, so that every cost, and so every choice, is the
same to the bit. A change to one of those formulas must be made here too:
`tests/domain/test_compiled.py` compares the two on random grids and whole evaluations.
"""

import logging
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from service.domain.arrays import Bools, Floats, Ints, as_floats
from service.domain.units import HOURS_PER_MONTH, SECONDS_PER_HOUR

HOURLY, COMMITTED, CHARGEBACK, NEW_BUILD = 0, 1, 2, 3  # the kinds of term the kernel prices

_log = logging.getLogger(__name__)


@dataclass(frozen=True)
class CostForm:
    """A term's cost of one candidate as the kernel computes it: its kind, and its coefficients,
    each an (S, 1) or (1, 1) array as `terms.py` makes them."""

    kind: int
    rate: Floats  # per accelerator-hour (hourly, chargeback, a new build's busy energy), or a committed
    # term's price × financing factor
    fixed: Floats | None = None  # a new build: an owned node's monthly fixed cost F
    months: float = 0.0  # a committed term's months, or a new build's depreciation months
    fee_per_node: float = 0.0  # a committed term: accelerators per node × the term's hours
    recurring: tuple[Floats | None, Floats | None] = (None, None)  # a recurring campaign's months
    # between instances and instances in all
    storage: Floats | None = None  # storage per wall-clock hour, where the venue charges for it

    def reads(self) -> tuple[str, ...]:
        """The candidates' figures the cost depends on, as the numpy path reads them."""
        hours = ("wall_seconds",) if self.storage is not None else ()
        return {HOURLY: ("accelerator_hours", *hours), CHARGEBACK: ("accelerator_hours",),
                COMMITTED: ("nodes", "wall_seconds"),
                NEW_BUILD: ("nodes", "wall_seconds", "accelerator_hours")}[self.kind]


def _scan(kind: int, meets: Any, nodes: Any, accelerator_hours: Any, wall_seconds: Any, rate: Any, fixed: Any,
          months: float, fee_per_node: float, recurring: bool, every: Any, total: Any, stored: bool, storage: Any,
          offset: int, best: Any, index: Any) -> None:  # pragma: no cover - runs compiled
    """One block's candidates priced and compared with the running least of each scenario
    (`best`, `index`, over the blocks before it): np.argmin's rules, the first of equals, a NaN as
    the least (the first NaN is kept), a candidate that does not meet the deadline as inf."""
    rows, width = meets.shape
    timed = stored or kind == COMMITTED or kind == NEW_BUILD  # the cost reads the wall clock
    for s in range(rows):
        least, at = best[s], index[s]
        if least != least:
            continue
        for k in range(width):
            if not meets[s, k]:
                continue
            hours = wall_seconds[s, k] / SECONDS_PER_HOUR if timed else 0.0
            window = terms = 0.0
            if kind == COMMITTED:  # committed_share: max(1, ⌈hours / term hours⌉) terms
                terms = hours / (months * HOURS_PER_MONTH)
                terms -= 1e-9
                terms = np.maximum(np.ceil(terms), 1.0)
                window = terms * months
            elif kind == NEW_BUILD:  # new_build_share: carried for the life, or the campaign if longer
                window = np.maximum(months, hours / HOURS_PER_MONTH)
            sharing = 1.0
            if recurring:  # recurrence.instances_sharing
                by_calendar = np.floor(window / every[s] + 1e-9)
                by_capacity = np.floor(window * HOURS_PER_MONTH / hours + 1e-9)
                sharing = np.maximum(1.0, np.minimum(np.minimum(by_calendar, by_capacity), total[s]))
            if kind == COMMITTED:  # committed_lines
                value = nodes[s, k] * fee_per_node * terms * (rate[s] / sharing)
            elif kind == NEW_BUILD:  # new_build_cost
                value = nodes[s, k] * window / sharing * fixed[s] + accelerator_hours[s, k] * rate[s]
            else:  # hourly_lines, chargeback_cost
                value = accelerator_hours[s, k] * rate[s]
            if stored:  # storage_cost
                value = value + storage[s] * hours
            if value != value:
                least, at = value, offset + k
                break
            if value < least:
                least, at = value, offset + k
        best[s], index[s] = least, at


Kernel = Callable[..., None]  # the compiled `_scan`
_kernel: list[Kernel | None] = []  # the compiled scan once tried in this process: [kernel] or [None]


def kernel() -> Kernel | None:
    """The compiled scan, compiled (or read from numba's cache) the first time this process asks;
    None where numba is missing or cannot compile it (logged once)."""
    if not _kernel:
        try:
            import numba  # here, not at the top: only a sweep imports it, so a quote never pays for it
            from numba import types

            floats, given = types.Array(types.float64, 2, "A", readonly=True), types.Array(
                types.float64, 1, "A", readonly=True)
            mask = types.Array(types.boolean, 2, "A", readonly=True)
            # One signature, compiled once (or read from numba's cache beside this file): any layout
            # of the arrays converts to it, where letting numba type each call compiles one per layout.
            signature = types.void(types.int64, mask, floats, floats, floats, given, given, types.float64,
                                   types.float64, types.boolean, given, given, types.boolean, given, types.int64,
                                   types.Array(types.float64, 1, "C"), types.Array(types.int64, 1, "C"))
            _kernel.append(numba.njit([signature], cache=True, nogil=True, error_model="numpy")(_scan))
        except Exception as error:  # any failure leaves the numpy path, which is always right
            _log.warning("compiled pricing unavailable, sweeps use numpy: %s", error)
            _kernel.append(None)
    return _kernel[0]


def loaded() -> bool:
    """Whether this process has the kernel already, so that using it costs nothing more."""
    return bool(_kernel) and _kernel[0] is not None


def cheapest(meets: Sequence[Bools], blocks: Sequence[Any], form: CostForm, scan: Kernel) -> Ints:
    """Per scenario, the column of the cheapest candidate that meets the deadline, among the blocks
    side by side, as `choice.choose` finds it from the blocks' costs, with the kernel `scan`."""
    return least_costs(meets, blocks, form, scan)[1]


def least_costs(meets: Sequence[Bools], blocks: Sequence[Any], form: CostForm,
                scan: Kernel) -> tuple[Floats, Ints]:
    """`cheapest`, with each scenario's least cost (inf where no candidate meets the deadline)."""
    figures = [{name: np.atleast_2d(as_floats(getattr(block, name))) for name in form.reads()} for block in blocks]
    every, total = form.recurring
    per_scenario = [value for value in (form.rate, form.fixed, every, total, form.storage) if value is not None]
    rows = max([np.shape(mask)[0] for mask in meets]
               + [value.shape[0] for block in figures for value in block.values()]
               + [np.size(value) for value in per_scenario])
    unused = np.zeros((1, 1))

    def grid(value: Any, width: int) -> Any:
        return np.broadcast_to(value, (rows, width))

    def column(value: Floats | None) -> Any:
        return np.broadcast_to(unused[0] if value is None else as_floats(value).reshape(-1), (rows,))

    best, index = np.full(rows, np.inf), np.zeros(rows, dtype=np.int64)
    offset = 0
    for mask, block in zip(meets, figures, strict=True):
        width = np.shape(mask)[1]
        scan(form.kind, grid(mask, width), *(grid(block.get(name, unused), width)
                                                for name in ("nodes", "accelerator_hours", "wall_seconds")),
               column(form.rate), column(form.fixed), float(form.months), float(form.fee_per_node),
               every is not None, column(every), column(total), form.storage is not None,
               column(form.storage), offset, best, index)
        offset += width
    return best, index
