"""Every venue's deadline table solved at once, where each has few allowances (model.md §5).

`deadline.table_search` solves one venue's table: a hundred-odd numpy calls on a handful of shapes,
made again for each venue (and for an interruptible term, which searches on its own), so that a quote
spends more on the calls than on the arithmetic. Where a venue's deadline table has few allowances (a
quote has one; a split quote one per part and split point) and its step one value for all its
candidates, the whole table is asked for (`TableRequest`), and the tables of every venue asking in a
round are solved as one (`solve_tables`): their shapes laid side by side, the tables (for the clock
only) and then the base candidates with the exact counts around each guess evaluated in one step call
each, and each (shape, allowance) cell's guess and choice made elementwise. Each venue gets what
`table_search` gives it alone, bit for bit (every figure is elementwise in the shapes and candidates,
and a cell's guess is its run's: `test_deadline_together.py` holds them to it); a venue with a cell
whose guess misses by more than a count, a bracket that `table_search` closes by false position, is
settled from there by `table_search`'s own `deadline.settle`, a run per cell.
"""

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from service.domain.arrays import Floats, Ints
from service.domain.deadline import (
    AROUND,
    POSITION_ZERO,
    TABLE_FIGURES,
    TABLE_KEY,
    allowances,
    distinct_rows,
    settle,
    table_rungs,
    table_search,
)
from service.domain.guesses import TABLE_RUNGS, Runs, interpolated
from service.domain.lockstep import Figures, Question, Search, ask, drive, joinable, per_candidate, split_columns
from service.domain.parallelism import Shapes
from service.domain.step import DEADLINE, Columns, Hardware, Load, side_by_side, step_figures

ALLOWANCES_TOGETHER = 64  # distinct allowances up to which a table is solved cell by cell with the others'
# (a split quote has one per part and split point, 17); beyond, `guess_runs` cuts them into runs of one
# guess, each evaluated once, and the table is searched step by step

# What `table_search` returns: the base candidates' figures, the exact counts' figures, the distinct rows
# of every shape's column among them, the row of each distinct allowance and each scenario's allowance.
TableAnswer = tuple[Figures, Figures, Ints, Ints, Ints]


def on_one_table(load: Load, hardware: Hardware, found: Shapes, base: Columns, k_min: Floats, k_top: Floats,
                 deadline: Floats) -> Search[TableAnswer]:
    """`deadline.table_search`, asked for whole where the table has at most ALLOWANCES_TOGETHER allowances
    and one step for its candidates (solved with the other venues' by `solve_tables`), else searched
    step by step."""
    if (allowances(load, hardware, deadline)[0].size <= ALLOWANCES_TOGETHER and joinable(base, hardware)
            and np.shape(k_min)[0] == np.shape(k_top)[0] == 1):
        return (yield from ask(TableRequest(load, hardware, found, base, k_min, k_top, deadline)))
    return (yield from table_search(load, hardware, found, base, k_min, k_top, deadline))


@dataclass(frozen=True)
class TableRequest(Question[TableAnswer]):
    """`table_search(load, hardware, found, base, k_min, k_top, deadline)`, asked for whole."""

    load: Load
    hardware: Hardware
    found: Shapes
    base: Columns
    k_min: Floats
    k_top: Floats
    deadline: Floats

    @classmethod
    def answer_together(cls, questions: Sequence[Any]) -> list[TableAnswer]:
        """The requests for one load whose shapes allow the same ZeRO stages solved together."""
        requests: Sequence[TableRequest] = questions
        groups: dict[tuple[int, tuple[int, ...]], list[int]] = {}
        for index, request in enumerate(requests):
            groups.setdefault((id(request.load), request.found.zero_stages), []).append(index)
        out: dict[int, TableAnswer] = {}
        for members in groups.values():
            out.update(zip(members, solve_tables([requests[index] for index in members]), strict=True))
        return [out[index] for index in range(len(requests))]

    def alone(self) -> TableAnswer:
        return drive(table_search(self.load, self.hardware, self.found, self.base, self.k_min, self.k_top,
                                  self.deadline))


def solve_tables(requests: Sequence[TableRequest]) -> list[TableAnswer]:
    """Each request's `table_search`, the requests' shapes side by side (one load, one set of ZeRO
    stages). Shape j of the whole is shape j − offset of its request; a key shape × TABLE_KEY + count
    names a count of a shape, as in `table_search`, so each request's exact counts are one run of the
    keys in order."""
    load, found = requests[0].load, requests[0].found
    counts = [request.found.count for request in requests]
    offsets = np.concatenate([[0], np.cumsum(counts)])
    tensor = np.concatenate([request.found.tensor for request in requests])
    pipeline = np.concatenate([request.found.pipeline for request in requests])
    unit = np.concatenate([request.found.node_unit(request.hardware.accelerators_per_node) for request in requests])
    per_node = np.repeat([float(request.hardware.accelerators_per_node) for request in requests], counts)
    hardware = [request.hardware for request in requests]

    def columns(shape: Ints, units: Floats) -> Columns:
        """`deadline.shape_columns` over the requests' shapes."""
        nodes = np.atleast_2d(units * unit[shape])
        return Columns(tensor[shape][np.newaxis, :], pipeline[shape][np.newaxis, :], nodes, nodes * per_node[shape],
                       np.full(nodes.shape, DEADLINE))

    # Every table in one step call, of only what the search reads of it.
    k_min = np.concatenate([request.k_min for request in requests], axis=1)
    k_top = np.concatenate([request.k_top for request in requests], axis=1)
    rungs = table_rungs(k_min, k_top)[0]  # (H, TABLE_RUNGS)
    table = columns(np.arange(offsets[-1]).repeat(TABLE_RUNGS), rungs.reshape(1, -1))
    figures = step_figures(load, per_candidate(hardware, [count * TABLE_RUNGS for count in counts]), table, found,
                           clock_only=True)
    fits, effective = (np.asarray(figures[name]) for name in TABLE_FIGURES)
    g = np.where(fits & ~np.isnan(effective), effective, np.inf).reshape(-1, TABLE_RUNGS)

    # Each shape's guess at each of its venue's allowances, a cell each (`guesses.guess_runs`, cell by cell:
    # a run of its is cells of one guess): the memory minimum where its first rung meets the allowance,
    # the top where no rung does (or the allowance is NaN), else where the line through the first rung
    # meeting it and the one below reaches it.
    found_allowances = [allowances(request.load, request.hardware, request.deadline) for request in requests]
    sizes = [afforded.size for afforded, _ in found_allowances]
    cell_offsets = np.concatenate([[0], np.cumsum(np.multiply(counts, sizes))])
    of_shape = np.repeat(sizes, counts)  # each shape's cells: its venue's allowances
    shape = np.repeat(np.arange(offsets[-1]), of_shape)  # each cell's shape, shape by shape
    position = np.arange(cell_offsets[-1]) - np.repeat(np.cumsum(of_shape) - of_shape, of_shape)  # its allowance
    afforded_offsets = np.repeat(np.cumsum(sizes) - sizes, counts)[shape]
    allowance = np.concatenate([afforded for afforded, _ in found_allowances])[afforded_offsets + position]
    valid = ~np.isnan(allowance)
    missed = np.count_nonzero(np.minimum.accumulate(g, axis=1)[shape] > allowance[:, np.newaxis], axis=1)
    state = np.where(valid, missed, TABLE_RUNGS)  # the first rung meeting the allowance; TABLE_RUNGS: none
    at = np.minimum(state, TABLE_RUNGS - 1)
    below = np.maximum(at - 1, 0)
    fixed = np.where(state == 0, rungs[shape, 0], np.where(state == TABLE_RUNGS, rungs[shape, -1], np.nan))
    guess = np.where(np.isnan(fixed), interpolated(rungs[shape, below], g[shape, below], rungs[shape, at],
                                                   g[shape, at], allowance), fixed)

    # The counts just below, at and above each guess, within the shape's range, each evaluated once.
    near = np.minimum(np.maximum(guess + AROUND, k_min[0][shape]), k_top[0][shape])  # (3, cells)
    near_keys = shape * TABLE_KEY + near
    ordered = np.sort(near_keys, axis=None)
    around = ordered[np.concatenate([[True], ordered[1:] != ordered[:-1]])]
    exact_shape = (around // TABLE_KEY).astype(np.int64)
    edges = exact_shape.searchsorted(offsets)  # request r's exact counts: edges[r] … edges[r + 1] − 1
    # The base candidates and the exact counts, every figure, in one step call.
    base_widths = [int(np.shape(request.base.nodes)[1]) for request in requests]
    figures = step_figures(load, per_candidate(hardware * 2, base_widths + np.diff(edges).tolist()), side_by_side(
        *(request.base for request in requests), columns(exact_shape, around - exact_shape * TABLE_KEY)), found)
    firsts = split_columns(figures, base_widths)
    exact = {name: value[:, sum(base_widths):] for name, value in figures.items()}
    own_exacts = split_columns(exact, np.diff(edges).tolist())  # each request's
    where = around.searchsorted(near_keys)
    g_near = np.where(exact["fits"][0], exact["effective_step_seconds"][0], np.inf)[where]
    meets = valid & (g_near <= allowance)  # (3, cells): below, at and above the guess
    # The first of the three that meets the allowance, else the one above; where the count below meets
    # or none does, with the first meeting rung interior, `table_search` closes a bracket between them.
    column = np.where(meets[0], where[0], np.where(meets[1], where[1], where[2]))
    interior = (state > 0) & (state < TABLE_RUNGS)
    bracketed = interior & (meets[0] | ~(meets[1] | meets[2]))

    answers: list[TableAnswer] = []
    for index, request in enumerate(requests):
        cells = slice(cell_offsets[index], cell_offsets[index + 1])
        first, last = edges[index], edges[index + 1]
        own_exact = own_exacts[index]
        afforded, scenario_of = found_allowances[index]
        count, size = counts[index], sizes[index]
        if not bracketed[cells].any():
            table = (column[cells] - first).reshape(count, size)  # each shape's column at each allowance
            answers.append((firsts[index], own_exact,
                            *((table.T, POSITION_ZERO) if size == 1 else distinct_rows(table, np.arange(size), size)),
                            scenario_of))
            continue
        # As `table_search` settles it from here, a run per cell: its runs, keys and exact figures.
        runs = Runs(np.arange(count).repeat(size), state[cells], position[cells], position[cells] + 1, guess[cells])
        answers.append((firsts[index], *settle(
            request.load, request.hardware, request.found, rungs[offsets[index]:offsets[index + 1]],
            g[offsets[index]:offsets[index + 1]], afforded, size - int(np.count_nonzero(np.isnan(afforded))), runs,
            near[:, cells], around[first:last] - offsets[index] * TABLE_KEY, own_exact), scenario_of))
    return answers

