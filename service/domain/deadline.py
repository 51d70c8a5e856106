"""The fewest node counts that meet a deadline, per scenario and shape (model.md §5): a table of
TABLE_RUNGS geometric node counts per shape from the memory minimum to the node limit, the first that
meets the deadline and the one below bracketing the answer, closed to neighbouring counts by false
position on α/k + β alternating with halving (`close_brackets`). One table row serves every scenario
when the step does not vary by scenario (`table_search`; `deadline_together` solves several venues' tables
at once); one per distinct step when it varies over few
values (`blocks_by_step`); else each scenario is searched on its own rungs (`own_step.fewest_meeting`).
Each finds what a scenario quoted alone finds. `layout.py` asks for it among a venue's candidates.
"""

from collections.abc import Callable
from dataclasses import dataclass, replace
from functools import cached_property
from typing import Any

import numpy as np

from service.domain import dominance
from service.domain.arrays import Bools, Floats, Ints, take_rows
from service.domain.gathered import GatheredGrid, gathered
from service.domain.guesses import TABLE_RUNGS, Runs, guess_runs, interpolated
from service.domain.lockstep import Search, StepRequest, ask, drive
from service.domain.parallelism import Shapes
from service.domain.step import (
    DEADLINE,
    Columns,
    Hardware,
    Load,
    scenario_rows,
    scenario_terms,
    side_by_side,
    step_figures,
)

SEARCH_STEPS = 100  # bracket steps towards the fewest nodes that meet the deadline: halving every other
# step closes any bracket of counts below MAX_UNITS well within it
SCENARIOS_PER_STEP = 64  # where the step varies, scenarios per distinct step from which solving a table per
# step beats solving each scenario on its own rungs (measured on a 10-venue catalog: even at 64 when the
# network varies, at about 24 when the model size does)
TABLE_KEY = 2.0**40  # (shape, count) keys: shape × TABLE_KEY + count, counts below it
MAX_UNITS = TABLE_KEY - 2.0  # node units a candidate may have: beyond any venue (limits.MAX_NODES)
def shape_columns(found: Shapes, shape: Ints, units: Floats, accelerators_per_node: int) -> Columns:
    """Deadline candidates: shape `shape[j]` at `units[..., j]` node units, one row (units (n,)) or one
    per scenario (units (R, n))."""
    nodes = np.atleast_2d(units * found.node_unit(accelerators_per_node)[shape])
    return Columns(found.tensor[shape][np.newaxis, :], found.pipeline[shape][np.newaxis, :], nodes,
                   nodes * accelerators_per_node, np.full(nodes.shape, DEADLINE))


def _step_fields(load: Load) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """The fields of the load and of the hardware that one step's figures depend on and that may vary
    by scenario (not tokens, runs, staging or prices): a run's FLOPs only where a run is one step
    (work given without tokens)."""
    one_step_runs = load.tokens_per_run is None or load.timed_flops_per_token is None
    return (("parameters", "timed_flops_per_token", *(("timed_flops_per_run",) if one_step_runs else ()),
             "global_batch_tokens", "checkpoint_bytes"),
            ("sustained_flops_per_accelerator", "network_gbps", "node_mtbf_hours"))


def _step_inputs(load: Load, hardware: Hardware) -> tuple[Floats, ...]:
    """The values of `_step_fields` that are given."""
    of_load, of_hardware = _step_fields(load)
    inputs = [getattr(load, name) for name in of_load] + [getattr(hardware, name) for name in of_hardware]
    return tuple(value for value in inputs if value is not None)


def table_search(load: Load, hardware: Hardware, found: Shapes, base: Columns, k_min: Floats, k_top: Floats,
                 deadline: Floats) -> Search[tuple[dict[str, Any], dict[str, Any], Ints, Ints, Ints]]:
    """Every scenario solved on one table of node counts, when the step does not vary by scenario:
    the base candidates' figures (one row, without the wall clock) and the deadline candidates'
    (`_deadline_block`), the table evaluated with the base candidates in one pass. A search
    (`lockstep.py`): its step figures are asked for, so that the venues' tables are evaluated together."""
    first, table, rungs = yield from _tables(load, hardware, found, base, k_min, k_top)
    return (first, *(yield from _deadline_block(load, hardware, found, k_min, k_top, rungs[0], table, deadline)))


def _tables(load: Load, hardware: Hardware, found: Shapes, base: Columns, k_min: Floats,
            k_top: Floats) -> Search[tuple[dict[str, Any], dict[str, Any], Floats]]:
    """The base candidates' figures and the deadline table's (each shape at its TABLE_RUNGS rungs),
    evaluated in one pass, one row per step (the rows of the load, the hardware and the bounds),
    and the rungs (R, H, G). Of the table, only what the search reads: `TABLE_FIGURES`."""
    rungs = table_rungs(k_min, k_top)
    table_columns = shape_columns(found, np.arange(found.count).repeat(TABLE_RUNGS),
                                  rungs.reshape(rungs.shape[0], -1), hardware.accelerators_per_node)
    both = yield from ask(StepRequest(load, hardware, side_by_side(base, table_columns), found))
    width = base.nodes.shape[1]
    return ({name: value[:, :width] for name, value in both.items()},
            {name: both[name][:, width:] for name in TABLE_FIGURES}, rungs)


TABLE_FIGURES = ("fits", "effective_step_seconds")  # what `_deadline_block` reads of the table


def step_varies(load: Load, hardware: Hardware, k_min: Floats, k_top: Floats) -> bool:
    """Whether one step's figures vary by scenario: only when an input of the step does."""
    return any(np.size(value) > 1 and np.shape(value)[0] > 1 for value in (*_step_inputs(load, hardware), k_min, k_top))


def table_rungs(k_min: Floats, k_top: Floats) -> Floats:
    """TABLE_RUNGS geometric node-unit counts per shape from the memory minimum to the top: (R, H, G)."""
    return np.asarray(np.ceil(k_min[..., np.newaxis] * (k_top / k_min)[..., np.newaxis] ** _RUNG_FRACTIONS - 1e-9))


AROUND = np.array([[-1.0], [0.0], [1.0]])  # the counts just below, at and above a guess
AROUND.setflags(write=False)
_RUNG_FRACTIONS = np.linspace(0.0, 1.0, TABLE_RUNGS)  # each rung's place from the minimum (0) to the top (1)
_RUNG_FRACTIONS.setflags(write=False)


def _deadline_block(load: Load, hardware: Hardware, found: Shapes, k_min: Floats, k_top: Floats, rungs: Floats,
                    table: dict[str, Any], deadline: Floats) -> Search[tuple[dict[str, Any], Ints, Ints, Ints]]:
    """Per scenario and shape, the fewest node units that meet the deadline, when the step does not
    vary by scenario: the effective step g(k) on TABLE_RUNGS geometric counts from the memory
    minimum to the node limit (one row for all scenarios); each scenario's allowance
    (deadline − staging) / steps located in it and interpolated as α/k + β; then the counts just
    below, at and above that evaluated exactly, each distinct (shape, count) once; where they do not
    settle it, the bracket left is closed by `close_brackets`.

    The answer depends on a scenario only through its allowance, so each distinct allowance is
    solved once, in ascending order, and a shape's allowances fall into a few runs of one guess
    (`guesses.guess_runs`): within a run each of the three exact counts meets the allowances from some
    position on, so every allowance's count is laid out run by run, not compared one by one.

    Returns the figures of the (shape, count) keys evaluated, one row; the distinct rows of every
    shape's candidate (its column among them) over the allowances in ascending order, (R, H); the row
    of each distinct allowance, (U,); and each scenario's allowance, (S,)."""
    afforded, scenario_of = allowances(load, hardware, deadline)
    h, u = found.count, afforded.size
    effective = table["effective_step_seconds"]
    g = np.where(table["fits"] & ~np.isnan(effective), effective, np.inf).reshape(h, TABLE_RUNGS)
    valid = u - int(np.count_nonzero(np.isnan(afforded)))
    runs = guess_runs(g, rungs, afforded, valid)
    # The exact counts just below, at and above each run's guess, within the shape's range, each
    # distinct (shape, count) evaluated once.
    # (np.minimum and np.maximum are np.clip without its wrappers; and the counts, finite within their
    # shape's range, are sorted and made distinct as np.unique would, at a third of its cost.)
    near = np.minimum(np.maximum(runs.count + AROUND, k_min[0][runs.shape]), k_top[0][runs.shape])
    near_keys = runs.shape * TABLE_KEY + near  # (3, R)
    ordered = np.sort(near_keys, axis=None)
    around = ordered[np.concatenate([[True], ordered[1:] != ordered[:-1]])]
    exact_shape = (around // TABLE_KEY).astype(np.int64)
    exact_columns = shape_columns(found, exact_shape, around - exact_shape * TABLE_KEY, hardware.accelerators_per_node)
    exact = yield from ask(StepRequest(load, hardware, exact_columns, found))
    return (*settle(load, hardware, found, rungs, g, afforded, valid, runs, near, around, exact), scenario_of)


def settle(load: Load, hardware: Hardware, found: Shapes, rungs: Floats, g: Floats, afforded: Floats, valid: int,
           runs: Runs, near: Floats, around: Floats, exact: dict[str, Any]) -> tuple[dict[str, Any], Ints, Ints]:
    """The rest of `_deadline_block` once the counts `near` each run's guess (3, R) are evaluated: `exact`,
    the figures of the distinct keys `around` (ascending). Each allowance takes the first of the three
    that meets it, and a bracket the line left open is closed; returns the figures of every key
    evaluated, the distinct rows of every shape's column among them and the row of each allowance."""
    h, u = found.count, afforded.size
    near_keys = runs.shape * TABLE_KEY + near
    g_exact = np.where(exact["fits"][0], exact["effective_step_seconds"][0], np.inf)
    where = around.searchsorted(near_keys)
    g_near = g_exact[where]  # (3, R)
    # Each of the three meets a run's allowances from the first at or above its step on (none of a
    # NaN allowance's); each allowance takes the first of the three that meets it, else the one above.
    meets_from = np.where(runs.start < valid,
                          np.minimum(np.maximum(afforded[:valid].searchsorted(g_near), runs.start), runs.end),
                          runs.end)  # (3, R)
    # Per run, in order: the count above up to where the guess or the count below meets, then the
    # guess up to where the count below meets, then the count below.
    second = np.minimum(meets_from[0], meets_from[1])
    bounds = np.array([runs.start, second, meets_from[0], runs.end])
    pieces = _Pieces(runs.shape.repeat(3), bounds[:-1].T.reshape(-1), where[::-1].T.reshape(-1))
    # Where the line missed by more than a count (the count below also meets, or none of the three
    # does), the bracket between a rung and the nearest exact count is closed as `fewest_meeting`
    # closes its own, so that a scenario gets the same count alone as in a sweep: per interior run,
    # the allowances before all three meet and those the count below meets.
    interior = (runs.state > 0) & (runs.state < TABLE_RUNGS)
    higher = np.where(interior, np.minimum(second, meets_from[2]) - runs.start, 0)
    lower = np.where(interior, runs.end - meets_from[0], 0)
    lengths = np.array([higher, lower]).T.reshape(-1)
    if lengths.any():
        run, position, from_rung = _cells(bounds[[0, 2]].T.reshape(-1), lengths)
        exact_counts = _ExactCounts(load, hardware, found, around, exact)
        shape_of = runs.shape[run]
        rung = shape_of * TABLE_RUNGS + runs.state[run]
        bracket = (np.where(from_rung, rungs.reshape(-1)[rung - 1], near[2][run]),
                   np.where(from_rung, g.reshape(-1)[rung - 1], g_near[2][run]),
                   np.where(from_rung, near[0][run], rungs.reshape(-1)[rung]),
                   np.where(from_rung, g_near[0][run], g.reshape(-1)[rung]))
        fewest, _ = close_brackets(
            lambda k, _: exact_counts.steps(np.asarray(shape_of * TABLE_KEY + k, dtype=np.float64)),
            afforded[position], *bracket)
        pieces = pieces.with_cells(shape_of, position, exact_counts.columns(shape_of * TABLE_KEY + fewest))
        exact = exact_counts.figures
    return (exact, *pieces.distinct_rows(h, u))


@dataclass(frozen=True)
class _Pieces:
    """Each shape's column of the table over the allowances (ascending) in pieces: piece i gives
    shape `shape[i]` the column `column[i]` from position `start[i]` up to where the next piece
    starts; the pieces are in order of shape, then position, and cover every (shape, allowance), some
    empty. Then single cells set apart (`with_cells`), in order, a later one over an earlier."""

    shape: Ints
    start: Ints
    column: Ints
    cells: tuple[tuple[Ints, Ints, Ints], ...] = ()

    def with_cells(self, shape: Ints, position: Ints, column: Ints) -> "_Pieces":
        return replace(self, cells=(*self.cells, (shape, position, column)))

    def distinct_rows(self, shapes: int, allowances: int) -> tuple[Ints, Ints]:
        """The rows of every shape's column, (R, H), one per run of allowances whose columns are all
        the same, in ascending allowance; and the row of each allowance, (U,). The columns are
        read only where some piece or cell starts, never laid out for every allowance."""
        # The pieces' first cells, as keys in order; of equal keys the last is the piece that holds the
        # cell (an empty piece starts where the next one does).
        key = self.shape * allowances + self.start
        if allowances == 1:  # one allowance (a quote): one row, read at position 0
            at = POSITION_ZERO
        else:
            edges = [self.start] + [part for shape, position, _ in self.cells for part in (position, position + 1)]
            at = np.unique(np.concatenate(edges))
            at = at[at < allowances]  # where some shape's column may change, from position 0 on
        table = self.column[key.searchsorted(np.arange(shapes)[:, np.newaxis] * allowances + at, side="right") - 1]
        for shape, position, value in self.cells:
            table[shape, at.searchsorted(position)] = value
        if allowances == 1:
            return table.T, POSITION_ZERO
        return distinct_rows(table, at, allowances)


def distinct_rows(table: Ints, at: Ints, allowances: int) -> tuple[Ints, Ints]:
    """Every shape's column at the ascending positions `at` (from 0) of the allowances, (H, len(at)), where
    the columns may change: its distinct rows, (R, H), one per run of positions whose columns are all the
    same, and the row of each of the `allowances`."""
    new = np.concatenate([[True], (table[:, 1:] != table[:, :-1]).any(axis=0)])
    firsts = at[new]
    return table[:, new].T, np.repeat(np.arange(firsts.size), np.diff(firsts, append=allowances))


POSITION_ZERO = np.zeros(1, dtype=np.int64)
POSITION_ZERO.setflags(write=False)


def allowances(load: Load, hardware: Hardware, deadline: Floats) -> tuple[Floats, Ints]:
    """The effective step each scenario affords, (deadline − staging) / steps: the distinct ones in
    ascending order (NaN last) and each scenario's among them, (S,). The venues whose staging is the
    same (each venue the load's deadline) share them, kept with the load: sorted once, not once per venue."""
    steps, staging = scenario_terms(load, hardware)
    key = ("allowances", deadline.tobytes(), deadline.shape, staging.tobytes(), staging.shape)
    if key not in load.kept:
        allowance = np.asarray((deadline - staging) / steps).reshape(-1)
        afforded, scenario_of = np.unique(allowance, return_inverse=True)
        afforded.setflags(write=False)
        scenario_of.setflags(write=False)
        load.kept[key] = afforded, scenario_of
    kept: tuple[Floats, Ints] = load.kept[key]
    return kept


def _cells(starts: Ints, lengths: Ints) -> tuple[Ints, Ints, Bools]:
    """The cells of pieces (two per run: `lengths[i]` positions from `starts[i]`) in order: each
    cell's run, its position and whether it lies in its run's second piece."""
    piece = np.repeat(np.arange(starts.size), lengths)
    offsets = np.cumsum(lengths) - lengths
    position = np.arange(piece.size) + (starts - offsets)[piece]
    return piece // 2, position, piece % 2 == 1


class _ExactCounts:
    """The exact figures of (shape, count) keys evaluated so far, one row of columns, added to as
    the search asks for counts not yet evaluated."""

    def __init__(self, load: Load, hardware: Hardware, found: Shapes, keys: Floats,
                 figures: dict[str, Any]) -> None:
        self.load, self.hardware, self.found = load, hardware, found
        self.keys, self.figures = keys, figures

    def columns(self, keys: Floats) -> Ints:
        """The column of each key, evaluating the keys not yet known first."""
        missing = np.setdiff1d(keys, self.keys)
        if missing.size:
            shape = (missing // TABLE_KEY).astype(np.int64)
            new = step_figures(self.load, self.hardware, shape_columns(
                self.found, shape, missing - shape * TABLE_KEY, self.hardware.accelerators_per_node), self.found)
            self.keys = np.concatenate([self.keys, missing])
            self.figures = {name: np.concatenate([np.asarray(self.figures[name]), np.asarray(value)], axis=1)
                            for name, value in new.items()}
        order = np.argsort(self.keys)
        return np.asarray(order[np.searchsorted(self.keys, keys, sorter=order)])

    def steps(self, keys: Floats) -> Floats:
        """The effective step of each key where its layout fits, inf where it does not."""
        column = self.columns(keys)
        return np.asarray(np.where(self.figures["fits"][0][column], self.figures["effective_step_seconds"][0][column],
                                   np.inf))


def close_brackets(measure: Callable[[Floats, Bools], Floats], target: Floats, k_lo: Floats, g_lo: Floats,
                   k_hi: Floats, g_hi: Floats) -> tuple[Floats, Floats]:
    """The fewest count whose measure (effective step or wall clock) meets the target, between k_lo,
    whose g_lo misses it, and k_hi, whose g_hi meets it: false position on g(k) = α/k + β alternating
    with halving until the two are neighbours (halving alone closes any bracket within SEARCH_STEPS).
    `measure(k, open)` need only measure the entries still open. Returns the count and its measure."""
    for step in range(SEARCH_STEPS):
        open_bracket = (k_hi - k_lo > 1.0) & (g_lo > target) & (g_hi <= target)
        if not open_bracket.any():
            break
        inside = (np.minimum(interpolated(k_lo, g_lo, k_hi, g_hi, target), k_hi - 1.0) if step % 2 == 0
                  else np.floor((k_lo + k_hi) / 2.0))
        guess = np.where(open_bracket, inside, k_hi)
        g = measure(guess, open_bracket)
        meets, misses = open_bracket & (g <= target), open_bracket & ~(g <= target)
        k_hi, g_hi = np.where(meets, guess, k_hi), np.where(meets, g, g_hi)
        k_lo, g_lo = np.where(misses, guess, k_lo), np.where(misses, g, g_lo)
    return k_hi, g_hi


@dataclass(frozen=True)
class StepGroups:
    """Scenarios grouped by their step: `members[g]` are the scenarios of group g in ascending order,
    `step_of[s]` the group of scenario s, over `rows` scenarios."""

    rows: int
    step_of: Ints
    members: tuple[Ints, ...]

    @cached_property
    def firsts(self) -> Ints:
        """Each group's first scenario."""
        return np.array([int(members[0]) for members in self.members])

    def one(self, group: int) -> slice:
        """The group's first scenario, as a slice that keeps the scenario axis."""
        first = int(self.firsts[group])
        return slice(first, first + 1)

    def alone(self, load: Load, hardware: Hardware, group: int) -> tuple[Load, Hardware]:
        """The load and hardware of the group's scenarios, with the step's inputs as one row."""
        members, one = self.members[group], self.one(group)
        of_load, of_hardware = _step_fields(load)
        return (replace(take_rows(load, members, self.rows),
                        **{name: take_rows(getattr(load, name), one, self.rows) for name in of_load}),
                replace(take_rows(hardware, members, self.rows),
                        **{name: take_rows(getattr(hardware, name), one, self.rows) for name in of_hardware}))


def step_groups(load: Load, hardware: Hardware, deadline: Floats, *bounds: Floats) -> StepGroups | None:
    """The scenarios grouped by the bits of their step's inputs and of the node-count `bounds`
    ((R, H) arrays), when the groups are few enough for a table per group to pay (at least
    SCENARIOS_PER_STEP scenarios each on average: a grid over model size, network or failure rates);
    else None."""
    rows = scenario_rows(load, hardware, deadline, *bounds)
    inputs = [np.asarray(value, dtype=np.float64) for value in (*_step_inputs(load, hardware), *bounds)]
    # Only what varies by scenario tells scenarios apart.
    varying = [value.reshape(rows, -1) for value in inputs if value.ndim and value.shape[0] == rows > 1]
    key = np.ascontiguousarray(np.concatenate(varying, axis=1))
    _, step_of, sizes = np.unique(key.view(np.dtype((np.void, key.itemsize * key.shape[1]))).reshape(-1),
                                  return_inverse=True, return_counts=True)
    if sizes.size * SCENARIOS_PER_STEP > rows:
        return None
    step_of = step_of.reshape(-1)
    members = np.split(np.argsort(step_of, kind="stable"), np.cumsum(sizes)[:-1])
    return StepGroups(rows, step_of, tuple(members))


def blocks_by_step(load: Load, hardware: Hardware, found: Shapes, groups: StepGroups, base: Columns,
                   k_min: Floats, k_top: Floats, deadline: Floats | None, *,
                   prune: bool = False) -> tuple[GatheredGrid, ...]:
    """The candidate blocks when the step varies by scenario but takes few distinct values: each
    group of scenarios sharing a step is solved as a scenario alone is (`table_search`, or only the
    base candidates without a deadline), and every scenario gathers its group's figures from the
    groups' rows laid side by side. The groups' base candidates and tables are evaluated in one
    pass, a row per group (its first scenario's step): `base`, `k_min` and `k_top` are given at the
    groups' first scenarios (or one row for all). With `prune`, each group's candidates that are
    never chosen move last and the columns holding only those go (`dominance.py`)."""
    rows, count = groups.rows, len(groups.members)
    step_load, step_hardware = take_rows(load, groups.firsts, rows), take_rows(hardware, groups.firsts, rows)
    if deadline is None:
        figures = step_figures(step_load, step_hardware, base, found)
        return (gathered(load, hardware, _one_row(figures, count), _base_column(groups, figures, prune)),)
    first, table, rungs = drive(_tables(step_load, step_hardware, found, base, k_min, k_top))
    exacts: list[dict[str, Any]] = []
    columns: list[tuple[Ints, Ints, Ints | None]] = []
    kept = 0
    offset = 0
    for group, members in enumerate(groups.members):
        alone_load, alone_hardware = groups.alone(load, hardware, group)
        at_group = slice(group, group + 1)  # the group's row of the arrays that run over the groups
        exact, distinct, row_of, of = drive(_deadline_block(
            alone_load, alone_hardware, found, take_rows(k_min, at_group, count), take_rows(k_top, at_group, count),
            take_rows(rungs, at_group, count)[0], take_rows(table, at_group, count),
            take_rows(deadline, members, rows)))
        row_kept = None
        if prune:
            base_kept = dominance.undominated(take_rows(first, at_group, count))  # all that can dominate
            distinct, row_kept = dominance.deadline_rows(base_kept, exact, distinct)
        at = np.take(distinct, row_of[of], axis=0)
        kept = max(kept, distinct.shape[1] if row_kept is None else int(np.max(row_kept, initial=0)))
        exacts.append(exact)
        columns.append((members, at + offset, None if row_kept is None else row_kept[row_of[of]]))
        offset += np.shape(exact["nodes"])[1]
    base_block = gathered(load, hardware, _one_row(first, count), _base_column(groups, first, prune))
    if kept == 0:
        return (base_block,)
    column = np.empty((rows, kept), dtype=np.int64)
    column_kept = np.full(rows, kept, dtype=np.int64)  # each scenario's row: the columns it keeps
    for members, at, at_kept in columns:
        column[members] = at[:, :kept]
        if at_kept is not None:
            column_kept[members] = at_kept
    return base_block, gathered(load, hardware, _side_by_side_figures(exacts), column, kept=column_kept)


def _base_column(groups: StepGroups, figures: dict[str, Any], prune: bool) -> Ints:
    """Each scenario's base candidates among the groups' rows laid side by side (`_one_row`); with
    `prune`, those its group's earlier candidates dominate moved last, and the columns of only those
    dropped."""
    width = np.shape(figures["nodes"])[1]
    order, kept = (dominance.in_order(figures) if prune else (np.arange(width)[np.newaxis, :], width))
    order = np.broadcast_to(order, (len(groups.members), width))[:, :kept]
    return np.asarray(groups.step_of[:, np.newaxis] * width + order[groups.step_of])


def _one_row(figures: dict[str, Any], count: int) -> dict[str, Any]:
    """Figures of `count` rows (a row may stand for all) laid side by side as one row."""
    return {name: np.broadcast_to(value, (count, np.shape(value)[1])).reshape(1, -1) for name, value in figures.items()}


def _side_by_side_figures(parts: list[dict[str, Any]]) -> dict[str, Any]:
    """One-row figures of several sets of candidates as one row."""
    return {name: np.concatenate([np.asarray(part[name]) for part in parts], axis=1) for name in parts[0]}
