"""The layout search's eligibility, pricing and choice compiled with numba, where a sweep pays for it.

Choosing a term's layout prices every candidate in every scenario and keeps the cheapest that
meets the deadline (`choice.choose` over `charges.Charges.cost`). In numpy that is several
whole-grid passes per term, each writing an (S, K) array, then a masked copy and an argmin, after
the deadline's candidates were spread over every scenario (`step.GatheredGrid`) and masked by which
a term may take (`choice.eligible`): about 45% of a sweep's time. Here each block of candidates is
priced and compared in one pass, a cell at a time, a gathered block read from its table through each
scenario's row of columns (`step.Gathered`), and nothing is written but each scenario's running least;
the terms of an offer that share their candidates (on demand, committed) in the same pass, each cell
read once for all of them (`choice.choose_priced_each`).
A sweep's break-even utilisations (`comparison.breakeven_utilisations`: every owned site against every
rented option, about ten whole-array passes each in numpy) are made here in one pass too.

The numpy path is the reference, and the kernel is a dependency its callers pass in (`kernel()`),
or not: a quote never does, so it never imports numba; a sweep does where importing numba (0.2 s)
and reading the kernel from numba's cache (0.1 s) pay for themselves (`usecases/chunk_pool.py`);
where numba is missing, `kernel()` is None and sweeps run numpy.

The kernel's formulas are those of `terms.py` (`chargeback_cost`, `new_build_share` and
`new_build_cost`, `hourly_lines`, `committed_share` and `committed_lines`, `storage_cost`),
`recurrence.instances_sharing` and `breakeven.breakeven_utilisation`, written for one cell,
operation for operation in numpy's order and with numpy's rules for NaN and division by zero, so
that every cost, and so every choice, is the same to the bit. A change to one of those formulas must
be made here too: `tests/domain/test_compiled.py` compares the two on random grids and whole
evaluations.
"""

import logging
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np

from service.domain.arrays import Bools, Floats, Ints, as_floats
from service.domain.gathered import Gathered
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


def _scan_of(gathered: bool, recurring: bool, stored: bool) -> Callable[..., None]:
    """The scan of one form of block for the terms of one venue on one node limit and deadline, for a
    campaign that recurs or not, at a venue that charges for storage or not: these three are the compiler's
    constants, so it drops every branch they decide. `kernel()` compiles each the first time a sweep needs
    it."""
    def scan(meets: Any, nodes: Any, accelerator_hours: Any, wall_seconds: Any, rows: Any, kept: Any, row_of: Any,
             table_nodes: Any, table_accelerators: Any, table_fits: Any, table_step: Any, steps: Any, staging: Any,
             limit: Any, deadline: Any, kinds: Any, rates: Any, fixeds: Any, months: Any, fees: Any, every: Any,
             total: Any, storage: Any, offset: int, best: Any, index: Any) -> None:  # pragma: no cover - compiled
        """One block's candidates priced for each term t and compared with its running least in each
        scenario (`best[t]`, `index[t]`, over the blocks before it): np.argmin's rules, the first of equals,
        a NaN as the least (the first NaN is kept), a candidate that does not meet the deadline as inf. A
        block's figures are (S, K) arrays with `meets`, or for a `gathered` block its table's, at the columns
        `rows[row_of[s]]` (the first `kept[row_of[s]]` of them), with which ones the terms may take and their
        wall clock made here as `choice.eligible` and `step.wall_figures` make them. Per term: its kind, its
        rate (S,) (per accelerator-hour, or a committed term's price × financing factor), a new build's fixed
        cost per node month (S,), its months (committed, or a new build's depreciation) and a committed term's
        fee per node."""
        width = rows.shape[1] if gathered else meets.shape[1]
        # A scenario's cells the terms may take, laid out once for all of them; then each term runs over
        # them with its running least in registers.
        cell_count, cell_hours, cell_used = np.empty(width), np.empty(width), np.empty(width)
        cell_column = np.empty(width, dtype=np.int64)
        for s in range(best.shape[1]):
            # The scenario's figures read once, not per cell (numba cannot hoist them past the writes).
            limit_s, deadline_s, storage_s = limit[s], deadline[s], storage[s]
            every_s, total_s, steps_s, staging_s, r = every[s], total[s], steps[s], staging[s], row_of[s]
            n = 0
            for k in range(kept[r] if gathered else width):
                if gathered:
                    c = rows[r, k]
                    if not (table_fits[c] and table_nodes[c] <= limit_s):
                        continue
                    seconds = steps_s * table_step[c] + staging_s
                    if not seconds <= deadline_s:
                        continue
                    count = table_nodes[c]
                    used = seconds * (table_accelerators[c] / SECONDS_PER_HOUR)
                else:
                    if not meets[s, k]:
                        continue
                    seconds, count, used = wall_seconds[s, k], nodes[s, k], accelerator_hours[s, k]
                cell_count[n], cell_hours[n], cell_used[n], cell_column[n] = count, seconds / SECONDS_PER_HOUR, used, k
                n += 1
            for t in range(best.shape[0]):
                least, at = best[t, s], index[t, s]
                if least != least:
                    continue
                kind, rate_s, fixed_s, term_months, fee = kinds[t], rates[t, s], fixeds[t, s], months[t], fees[t]
                for j in range(n):
                    hours = cell_hours[j]
                    if kind in (COMMITTED, NEW_BUILD):
                        if kind == COMMITTED:  # committed_share: max(1, ⌈hours / term hours⌉) terms
                            terms = hours / (term_months * HOURS_PER_MONTH)
                            terms -= 1e-9
                            terms = np.maximum(np.ceil(terms), 1.0)
                            window = terms * term_months
                        else:  # new_build_share: carried for the life, or the campaign if longer
                            window = np.maximum(term_months, hours / HOURS_PER_MONTH)
                        sharing = 1.0
                        if recurring:  # recurrence.instances_sharing
                            by_calendar = np.floor(window / every_s + 1e-9)
                            by_capacity = np.floor(window * HOURS_PER_MONTH / hours + 1e-9)
                            sharing = np.maximum(1.0, np.minimum(np.minimum(by_calendar, by_capacity), total_s))
                        if kind == COMMITTED:  # committed_lines
                            value = cell_count[j] * fee * terms * (rate_s / sharing)
                        else:  # new_build_cost
                            value = cell_count[j] * window / sharing * fixed_s + cell_used[j] * rate_s
                    else:  # hourly_lines, chargeback_cost
                        value = cell_used[j] * rate_s
                    if stored:  # storage_cost
                        value = value + storage_s * hours
                    if not value >= least:  # less, or NaN (one comparison for both, on the common path)
                        least, at = value, offset + cell_column[j]
                        if value != value:
                            break
                best[t, s], index[t, s] = least, at
    return scan


def _reach(rows: Any, kept: Any, row_of: Any, table_nodes: Any, table_fits: Any, table_step: Any, steps: Any,
           staging: Any, limit: Any, deadline: Any, allowed: Any, meets: Any) -> None:  # pragma: no cover - compiled
    """Per scenario of a gathered block, whether some candidate fits within the node limit, and
    whether some also meets the deadline (`choice.eligible`'s any of each, nothing spread). The
    candidates are read from the last: a shape's counts ascend, so one that meets comes sooner."""
    for s in range(allowed.shape[0]):
        r, limit_s, deadline_s, steps_s, staging_s = row_of[s], limit[s], deadline[s], steps[s], staging[s]
        some = met = False
        for k in range(kept[r] - 1, -1, -1):  # a dominated column fits or meets only where its dominator does
            c = rows[r, k]
            if table_fits[c] and table_nodes[c] <= limit_s:
                some = True
                if steps_s * table_step[c] + staging_s <= deadline_s:
                    met = True
                    break
        allowed[s], meets[s] = some, met


def _breakeven(fixed: Any, per_node_hours: float, variable: Any, listed: Any, conversion: Any, ruled_out: Any,
               out: Any) -> None:  # pragma: no cover - runs compiled
    """Per rented option r and scenario s, the break-even utilisation F / (A · 730 · (p − v)), p the
    listed price × its conversion, where the margin is positive, the utilisation at most full use and
    the option not ruled out, else NaN: `breakeven.breakeven_utilisation` and `within_reach` in one
    pass, operation for operation. The three conditions are combined without short-circuits, so the loop
    has no branch and the compiler vectorises it: 2.7 times faster than `a and b and not c`."""
    for r in range(out.shape[0]):
        for s in range(out.shape[1]):
            margin = listed[r, s] * conversion[r, s] - variable[s]
            value = fixed[s] / (per_node_hours * margin)
            within = (margin > 0.0) & (value <= 1.0) & (not ruled_out[r, s])
            out[r, s] = value if within else np.nan


@dataclass(frozen=True)
class Kernel:
    """The compiled scans (`_scan_of`: called with whether the block is gathered, the campaign recurs and
    the venue stores data, then the scan's own arguments), `_reach` and `_breakeven`."""

    scan: Callable[..., None]
    reach: Callable[..., None]
    breakeven: Callable[..., None]


_kernel: list[Kernel | None] = []  # the kernel once tried in this process: [kernel] or [None]


def kernel() -> Kernel | None:
    """The compiled kernel, compiled (or read from numba's cache) the first time this process asks;
    None where numba is missing or cannot compile it (logged once)."""
    if not _kernel:
        try:
            import numba  # here, not at the top: only a sweep imports it, so a quote never pays for it
            from numba import types

            def array(kind: Any, dimensions: int, layout: Literal["A", "C"] = "A") -> Any:
                return types.Array(kind, dimensions, layout, readonly=True)
            floats, given = array(types.float64, 2), array(types.float64, 1)
            columns, kept, row_of = array(types.int64, 2, "C"), array(types.int64, 1, "C"), array(types.int64, 1)
            table, table_flags = array(types.float64, 1, "C"), array(types.boolean, 1, "C")
            out_flags = types.Array(types.boolean, 1, "C")
            # One signature each, compiled once (or read from numba's cache beside this file), the scan
            # once per variant the first time it is needed: any layout of the arrays converts to it, where
            # letting numba type each call compiles one per layout.
            scan_signature = types.void(array(types.boolean, 2), floats, floats, floats, columns, kept, row_of, table,
                                        table, table_flags, table, given, given, given, given, array(types.int64, 1),
                                        floats, floats, table, table, given, given, given, types.int64,
                                        types.Array(types.float64, 2, "C"), types.Array(types.int64, 2, "C"))
            reach = types.void(columns, kept, row_of, table, table_flags, table, given, given, given, given,
                               out_flags, out_flags)
            breakeven = types.void(given, types.float64, given, floats, floats, array(types.boolean, 2),
                                   types.Array(types.float64, 2, "C"))

            def compiled(signature: Any, function: Callable[..., None]) -> Callable[..., None]:
                return numba.njit([signature], cache=True, nogil=True, error_model="numpy")(function)
            scans: dict[tuple[bool, bool, bool], Callable[..., None]] = {}

            def scan(gathered: bool, recurring: bool, stored: bool, *arguments: Any) -> None:
                key = (bool(gathered), bool(recurring), bool(stored))
                if key not in scans:  # compiled, or read from numba's cache, the first time it is needed
                    scans[key] = compiled(scan_signature, _scan_of(*key))
                scans[key](*arguments)
            _kernel.append(Kernel(scan, compiled(reach, _reach), compiled(breakeven, _breakeven)))
        except Exception as error:  # any failure leaves the numpy path, which is always right
            _log.warning("compiled pricing unavailable, sweeps use numpy: %s", error)
            _kernel.append(None)
    return _kernel[0]


def loaded() -> bool:
    """Whether this process has the kernel already, so that using it costs nothing more."""
    return bool(_kernel) and _kernel[0] is not None


_NONE = np.zeros((1, 1))
_NO_COLUMNS = np.zeros((1, 1), dtype=np.int64)
_NO_FLAGS = np.zeros(1, dtype=bool)
_NO_MASK = np.zeros((1, 1), dtype=bool)


def _along(value: Any, rows: int, dtype: Any = np.float64) -> Any:
    """A per-scenario figure ((S, 1), (S,), (1, 1), a scalar or None) as an (rows,) array of `dtype`: itself
    where it has one value per scenario (as it is laid out: the kernel reads any layout), else a view
    repeating its one value (made directly: a sweep makes about a thousand of these a chunk, and
    np.broadcast_to costs four times as much)."""
    array = _NONE[0] if value is None else np.asarray(value, dtype=dtype).reshape(-1)
    if array.shape[0] == rows:
        return array
    if array.shape[0] != 1:
        raise ValueError(f"{array.shape[0]} values for {rows} scenarios")
    repeated = np.ndarray((rows,), dtype=array.dtype, buffer=np.ascontiguousarray(array), strides=(0,))
    repeated.flags.writeable = False  # one value shared by every scenario
    return repeated


def _scenarios(block: Gathered, limit: Floats, deadline: Floats) -> int:
    """How many scenarios a gathered block runs over under a limit and a deadline, as numpy would
    broadcast them."""
    return max(block.row_of.size, block.steps.size, block.staging.size, np.size(limit), np.size(deadline))


def reach(block: Gathered, limit: Floats, deadline: Floats, compiled: Kernel) -> tuple[Bools, Bools]:
    """Per scenario of a gathered block, whether some candidate fits within `limit` and whether some
    also meets `deadline` ((S, 1) or (1, 1) each), as `choice.eligible` finds them."""
    rows = _scenarios(block, limit, deadline)
    allowed, meets = np.zeros(rows, dtype=bool), np.zeros(rows, dtype=bool)
    compiled.reach(block.rows, block.kept, np.broadcast_to(block.row_of, (rows,)), block.nodes, block.fits,
                   block.effective_step_seconds, _along(block.steps, rows), _along(block.staging, rows),
                   _along(limit, rows), _along(deadline, rows), allowed, meets)
    return allowed, meets


def scanned_together(forms: Sequence[CostForm]) -> bool:
    """Whether the terms of `forms`, on one node limit and deadline, are priced by one scan of their
    candidates: they store alike, and those that share commitments among instances (committed terms, a new
    build) share them alike (an offer's on-demand and committed terms)."""
    shared = [form.recurring for form in forms if form.kind in (COMMITTED, NEW_BUILD)]
    return (all(_same(form.storage, forms[0].storage) for form in forms)
            and all(_same(every, shared[0][0]) and _same(total, shared[0][1]) for every, total in shared))


def _same(one: Floats | None, other: Floats | None) -> bool:
    return one is other or (one is not None and other is not None and np.array_equal(one, other))


def least_costs(meets: Sequence[Bools | None], gathered: Sequence[Gathered | None], widths: Sequence[int],
                limit: Floats, deadline: Floats, blocks: Sequence[Any], forms: Sequence[CostForm],
                compiled: Kernel) -> tuple[Floats, Ints]:
    """Per term of `forms` (on one node limit and deadline) and scenario, the column of the cheapest candidate
    that meets the deadline among the blocks side by side, as `choice.choose` finds it from the blocks' costs,
    with the kernel `compiled`, and its cost (inf where no candidate meets the deadline): (terms, S) each. A
    block is given by its figures and which of its candidates meet the deadline (`meets`), or where that is
    None by its `gathered` form and the node `limit` and `deadline`. Terms `scanned_together` are priced by
    one scan of each block, which reads each candidate once for all of them (an offer's on-demand and
    committed terms: a quarter less time than one scan each); others one by one."""
    if len(forms) > 1 and not scanned_together(forms):
        each = [least_costs(meets, gathered, widths, limit, deadline, blocks, [form], compiled) for form in forms]
        return np.concatenate([least for least, _ in each]), np.concatenate([index for _, index in each])
    reads = sorted({name for form in forms for name in form.reads()})
    figures = [{} if mask is None else {name: np.atleast_2d(as_floats(getattr(block, name))) for name in reads}
               for mask, block in zip(meets, blocks, strict=True)]
    every, total = next((form.recurring for form in forms if form.kind in (COMMITTED, NEW_BUILD)), (None, None))
    storage = forms[0].storage
    per_scenario = [value for form in forms for value in (form.rate, form.fixed) if value is not None]
    rows = max([np.shape(mask)[0] for mask in meets if mask is not None]
               + [_scenarios(at, limit, deadline) for at in gathered if at is not None]
               + [value.shape[0] for block in figures for value in block.values()]
               + [np.size(value) for value in (*per_scenario, every, total, storage) if value is not None])
    best, index = np.full((len(forms), rows), np.inf), np.zeros((len(forms), rows), dtype=np.int64)
    terms = (_along(limit, rows), _along(deadline, rows), np.array([form.kind for form in forms], dtype=np.int64),
             _each_along([form.rate for form in forms], rows), _each_along([form.fixed for form in forms], rows),
             np.array([form.months for form in forms]), np.array([form.fee_per_node for form in forms]),
             _along(every, rows), _along(total, rows), _along(storage, rows))  # the same for every block
    offset = 0
    for mask, block, width, at in zip(meets, figures, widths, gathered, strict=True):
        compiled.scan(mask is None, every is not None, storage is not None, *_cells(mask, block, width, at, rows),
                      *terms, offset, best, index)
        offset += width
    return best, index


def _each_along(values: Sequence[Any], rows: int) -> Any:
    """Each term's per-scenario figure (as `_along` reads one) as a row of a (terms, rows) array: a view where
    there is one term or none has the figure, stacked only where several terms have their own."""
    if len(values) == 1 or all(value is None for value in values):
        one = _along(values[0], rows)[np.newaxis]
        return one if len(values) == 1 else np.broadcast_to(one, (len(values), rows))
    return np.stack([_along(value, rows) for value in values])


def _cells(mask: Bools | None, block: dict[str, Any], width: int, at: Gathered | None, rows: int) -> tuple[Any, ...]:
    """A block's cells as the scans read them: its figures and which candidates meet the deadline, or its
    gathered form."""
    def grid(value: Any) -> Any:
        return np.broadcast_to(value, (rows, width))
    if mask is None:
        assert at is not None
        return (_NO_MASK, _NONE, _NONE, _NONE, at.rows, at.kept, np.broadcast_to(at.row_of, (rows,)), at.nodes,
                at.accelerators, at.fits, at.effective_step_seconds, _along(at.steps, rows), _along(at.staging, rows))
    figure_names = ("nodes", "accelerator_hours", "wall_seconds")
    return (grid(np.asarray(mask, dtype=bool)), *(grid(block.get(name, _NONE)) for name in figure_names),
            _NO_COLUMNS, _NO_COLUMNS[0], np.broadcast_to(_NO_COLUMNS[0], (rows,)), _NONE[0], _NONE[0], _NO_FLAGS,
            _NONE[0], _along(None, rows), _along(None, rows))


def reached_utilisations(fixed: Floats, accelerators_per_node: int, variable: Floats, listed: Sequence[Floats],
                         conversion: Sequence[Floats], ruled_out: Sequence[Bools], compiled: Kernel, *,
                         out: Floats) -> Floats:
    """Per rented option r and scenario, its break-even utilisation where it is within reach, else NaN,
    written into `out` (R, S), as `comparison.breakeven_utilisations` finds it in numpy, with the kernel
    `compiled`: row by row, each row's listed price, conversion and screen (`listed[r]`, ...) one value or
    one per scenario, and a row's one value read as such, never spread (a conversion is one value but for
    interruptible capacity; stacked per site, they cost a sweep on ten venues 6 ms a chunk of 25,000)."""
    scenarios = out.shape[1]
    hours = float(accelerators_per_node) * HOURS_PER_MONTH
    fixed_along, variable_along = _along(fixed, scenarios), _along(variable, scenarios)
    for r, row in enumerate(out):
        compiled.breakeven(fixed_along, hours, variable_along, _along(listed[r], scenarios)[np.newaxis],
                           _along(conversion[r], scenarios)[np.newaxis],
                           _along(ruled_out[r], scenarios, np.bool_)[np.newaxis], row[np.newaxis])
    return out
