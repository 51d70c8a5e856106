"""Layout search: a bounded set of (tensor, pipeline, data) layouts per venue (model.md §5).

The candidates are, for each shape (t, p) of `parallelism.shapes`, the fewest nodes that hold the
model, the most each node limit allows, and the fewest that meet the deadline (`deadline.py`: the
bracket around the first count of a table of node counts that meets it, closed by false position and
halving; one table row for all scenarios, one per distinct step where the step varies over few values,
else one per scenario): a handful per shape whatever the venue's size. `step.py` evaluates each candidate;
`choice.py` picks among them.
"""

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, fields, replace
from typing import Any

import numpy as np

from service.domain import dominance
from service.domain.arrays import ArrayLike, Floats, Ints, as_floats, every_row, take_rows
from service.domain.deadline import (
    MAX_UNITS,
    blocks_by_step,
    step_groups,
    step_varies,
    table_rungs,
)
from service.domain.deadline_together import on_one_table
from service.domain.gathered import GatheredGrid, gathered
from service.domain.lockstep import Search, StepRequest, ask, drive
from service.domain.memory import minimum_data_parallel
from service.domain.own_step import FiguresOnRead, fewest_meeting, step_figures_in_rows
from service.domain.parallelism import Shapes, shapes
from service.domain.step import (
    DEADLINE,
    FIGURES,
    MEMORY,
    NODE_LIMIT,
    PINNED,
    Architecture,
    Columns,
    FiguresWhenRead,
    Hardware,
    LayoutGrid,
    Load,
    accelerator_hours,
    activations,
    batch_sequences,
    evaluate_columns,
    rank_parameters,
    scenario_rows,
    wall_figures,
    with_wall,
)

__all__ = ["DEADLINE", "MEMORY", "NODE_LIMIT", "PINNED", "Architecture", "Candidates", "Hardware", "LayoutGrid",
           "Load", "evaluate_layouts", "layout_search"]


# Scenarios up to which the layouts chosen from candidates hold the candidates, so that one scenario taken
# (a split quote's campaign, of its 1 + 2 × 8 scenarios) reads its cell at once. Beyond, they hold none: a
# sweep keeps every option's chosen layout to the end of its chunk, and every venue's candidates would stay
# alive with it (an own-step CSV sweep's peak RSS went from 509 MB to 1.4 GB when they did).
CELLS_FROM_CANDIDATES_UP_TO = 64


@dataclass(frozen=True)
class Candidates:
    """A venue's candidate layouts in blocks of columns, each a LayoutGrid of arrays that broadcast
    to (R, K_b): the blocks that do not vary by scenario stay one row instead of being copied into
    one (S, K) grid. Column j of the whole is column j − offset of its block."""

    blocks: tuple[LayoutGrid, ...]
    _picked: dict[tuple[int, int], LayoutGrid] = field(default_factory=dict, init=False, compare=False, repr=False)

    @property
    def widths(self) -> list[int]:
        return [block.width if isinstance(block, GatheredGrid) else int(block.nodes.shape[1]) for block in self.blocks]

    def each(self, figure: Callable[[LayoutGrid], ArrayLike]) -> Any:
        """`figure` of every block, side by side along axis 1 (rows broadcast where needed)."""
        parts = [np.asarray(figure(block)) for block in self.blocks]
        parts = [part.reshape(-1, 1) if part.ndim < 2 else part for part in parts]
        widths = self.widths
        if len(parts) == 1:
            return parts[0]
        rows = max(part.shape[0] for part in parts)
        return np.concatenate([np.broadcast_to(part, (rows, width))
                               for part, width in zip(parts, widths, strict=True)], axis=1)

    def whole(self) -> LayoutGrid:
        """Every field as one (R, K) array: for tests and inspection, not the hot path."""
        return LayoutGrid(**{f.name: self.each(_field(f.name)) for f in fields(LayoutGrid)})

    def pick(self, index: Ints) -> LayoutGrid:
        """Every figure at the column `index` chosen per scenario: (S,) arrays of each field's dtype,
        each taken when first read; for one scenario (a quote, whose document reads every figure),
        all taken now (`cell`)."""
        if index.shape[0] == 1:
            return self.cell(0, int(index[0]))
        ends = np.cumsum(self.widths)
        rows = every_row(index.shape[0])
        lowest, highest = np.searchsorted(ends, (index.min(), index.max()), side="right")
        if lowest == highest:  # every scenario chose from one block: its rows are all of them, in order
            read = self.blocks[lowest].cells(rows, index - (ends[lowest] - self.widths[lowest]))
            return _picked_from(self, index, lambda name: np.asarray(read(name)))
        block_of = np.searchsorted(ends, index, side="right")
        # Per block, the scenarios whose choice lies in it, and the chosen column within the block.
        parts = [(block, chosen, rows[chosen], index[chosen] - (end - width))
                 for block, end, width, chosen in ((block, end, width, block_of == b) for b, (block, end, width)
                                                   in enumerate(zip(self.blocks, ends, self.widths, strict=True)))
                 if chosen.any()]
        readers = [(chosen, block.cells(at_rows, at_columns)) for block, chosen, at_rows, at_columns in parts]

        def picked(name: str) -> Any:
            taken = [np.asarray(read(name)) for _, read in readers]
            out = np.empty(index.shape, dtype=np.result_type(*taken))
            for (chosen, _), values in zip(readers, taken, strict=True):
                out[chosen] = values
            return out
        return _picked_from(self, index, picked)

    def cell(self, row: int, chosen: int) -> LayoutGrid:
        """Every figure of column `chosen` at scenario `row`, (1,) arrays all taken now and kept: a
        venue's terms often choose the same layout."""
        if (row, chosen) not in self._picked:
            column, at, widths = chosen, 0, self.widths
            while column >= widths[at]:  # the block the column lies in, and its column there
                column -= widths[at]
                at += 1
            read = self.blocks[at].cells(np.array([row]), np.array([column]))
            self._picked[row, chosen] = LayoutGrid(**{name: _shared(read(name)) for name in FIGURES})
        return self._picked[row, chosen]


class _Picked(FiguresWhenRead):
    """The figures of the layouts chosen from candidates, each made when first read; one scenario of them
    taken (`arrays.take_rows`: a split quote takes its campaign's) is its cell, read at once, where the
    candidates are held (CELLS_FROM_CANDIDATES_UP_TO)."""

    def at_rows(self, index: Any, scenarios: int) -> LayoutGrid:
        rows = every_row(scenarios)[index]
        chosen_from = self.__dict__["_chosen_from"]
        if rows.size != 1 or chosen_from is None:
            return super().at_rows(index, scenarios)
        candidates: Candidates
        candidates, chosen = chosen_from
        return candidates.cell(int(rows[0]), int(chosen[rows[0]]))


def _picked_from(candidates: Candidates, index: Ints, make: Callable[[str], Any]) -> LayoutGrid:
    """The layouts chosen at `index` from `candidates`, whose figure `name` is `make(name)`; holding the
    candidates for few scenarios only (CELLS_FROM_CANDIDATES_UP_TO)."""
    grid = _Picked.of(make)
    held = (candidates, index) if index.shape[0] <= CELLS_FROM_CANDIDATES_UP_TO else None
    object.__setattr__(grid, "_chosen_from", held)
    return grid


def _shared(value: ArrayLike) -> Any:
    """A figure of a layout that several options share, read-only so that none can change another's (a
    reader's cells are its own arrays or views of the block, which this leaves writable)."""
    array = np.asarray(value)
    array.setflags(write=False)
    return array


def _field(name: str) -> Callable[[LayoutGrid], ArrayLike]:
    def figure(block: LayoutGrid) -> ArrayLike:
        return np.asarray(getattr(block, name))
    return figure


@dataclass(frozen=True)
class NodeFit:
    """What a node's size makes of the campaign's model, whatever the venue: the shapes (t, p), each
    shape's node unit (1, H), the fewest units that hold the model (R, H) and the most whose replicas
    each still get a micro-batch. It depends on the load, the accelerators per node and their memory
    only, so the venues whose nodes are of one size share it (`node_fit`)."""

    found: Shapes
    unit: Floats
    k_min: Floats
    k_batch: Floats


def node_fit(load: Load, hardware: Hardware) -> NodeFit:
    per_node = hardware.accelerators_per_node
    found = _shapes(load, per_node, fixed_accelerators=None)
    unit = found.node_unit(per_node)[np.newaxis, :]
    return NodeFit(found, unit, _minimum_units(load, hardware, found, unit), _batch_units(load, hardware, found, unit))


def evaluate_layouts(load: Load, hardware: Hardware, *, node_limits: Sequence[ArrayLike],
                     fixed_accelerators: int | None = None, fit: NodeFit | None = None,
                     scenarios: int = 1) -> tuple[Candidates, Floats]:
    """Every candidate layout of the venue, and the fewest nodes any layout needs to hold the
    model (inf when none can): the memory minimum the screens report. `fit` is `node_fit(load,
    hardware)` when the caller has it already; `scenarios`, how many the candidates will be priced
    over, where prices vary and the load does not."""
    return drive(layout_search(load, hardware, node_limits=node_limits, fixed_accelerators=fixed_accelerators,
                               fit=fit, scenarios=scenarios))


def layout_search(load: Load, hardware: Hardware, *, node_limits: Sequence[ArrayLike],
                  fixed_accelerators: int | None = None, fit: NodeFit | None = None,
                  scenarios: int = 1) -> Search[tuple[Candidates, Floats]]:
    """`evaluate_layouts` as a search (`lockstep.py`), whose deadline table and exact counts are
    asked for, so that the searches of several venues evaluate them together."""
    per_node = hardware.accelerators_per_node
    fit = fit or node_fit(load, hardware)
    found, unit, k_min, k_batch = fit.found, fit.unit, fit.k_min, fit.k_batch
    fewest = np.asarray(np.min(k_min * unit, axis=1))
    if fixed_accelerators is not None:
        found = _shapes(load, per_node, fixed_accelerators=fixed_accelerators)
        tensor = found.tensor[np.newaxis, :]
        count = float(fixed_accelerators)
        nodes = np.full_like(tensor, np.ceil(count / per_node))
        pinned = Columns(tensor, found.pipeline[np.newaxis, :], nodes, np.full_like(tensor, count),
                         np.full(tensor.shape, PINNED))
        return Candidates((evaluate_columns(load, hardware, pinned, found),)), fewest
    tensor, pipeline = found.tensor[np.newaxis, :], found.pipeline[np.newaxis, :]
    # Evaluated all the same where nothing fits; counts beyond any venue are cut to one that still
    # does not fit, so that every count stays a small exact integer.
    k_min = np.minimum(np.where(np.isfinite(k_min), k_min, 1.0), MAX_UNITS)
    tops = [np.maximum(np.minimum(np.floor(as_floats(limit).reshape(-1, 1) / unit + 1e-9), k_batch), 1.0)
            for limit in node_limits]
    k_top = np.minimum(np.maximum(np.maximum.reduce(np.broadcast_arrays(*tops)), k_min), MAX_UNITS)

    deadline = as_floats(load.deadline_seconds).reshape(-1, 1)
    has_deadline = bool(np.isfinite(deadline).any())
    if not step_varies(load, hardware, k_min, k_top):
        base = _base_columns(found, unit, per_node, k_min, tops)
        # A sweep drops the candidates that are never chosen (dominance.py) before pricing them.
        prune = max(scenarios, scenario_rows(load, hardware)) >= dominance.PRUNED_FROM
        if not has_deadline:
            figures = yield from ask(StepRequest(load, hardware, base, found))
            if prune and dominance.single_row(figures):
                figures = dominance.undominated(figures)
            return Candidates((_base_block(load, hardware, figures, gather=prune),)), fewest
        figures, exact, distinct, row_of_allowance, allowance_of = yield from on_one_table(
            load, hardware, found, base, k_min, k_top, deadline)
        kept = None
        if prune and dominance.single_row(figures):
            figures = dominance.undominated(figures)
            distinct, kept = dominance.deadline_rows(figures, exact, distinct)
            distinct = distinct[:, :int(np.max(kept, initial=0))]
        first = _base_block(load, hardware, figures, gather=prune)
        if distinct.shape[1] == 0:
            return Candidates((first,)), fewest
        return Candidates((first, gathered(load, hardware, exact, distinct, row_of_allowance[allowance_of],
                                           kept))), fewest
    groups = step_groups(load, hardware, deadline, k_min, *tops)
    if groups is not None:  # the base candidates and bounds at each group's first scenario only
        def at_groups(bound: Floats) -> Floats:
            return np.asarray(take_rows(bound, groups.firsts, groups.rows))
        return Candidates(blocks_by_step(
            load, hardware, found, groups, _base_columns(found, unit, per_node, at_groups(k_min),
                                                         [at_groups(top) for top in tops]),
            at_groups(k_min), at_groups(k_top), deadline if has_deadline else None,
            prune=max(scenarios, groups.rows) >= dominance.PRUNED_FROM)), fewest
    base = _base_columns(found, unit, per_node, k_min, tops)
    # Each scenario has its own step: only the figures that price and choose a layout are made for
    # every candidate, the others for the chosen ones (FiguresOnRead).
    rows = scenario_rows(load, hardware, deadline, k_min, k_top)
    step = step_figures_in_rows(load, hardware, base, found, rows, clock_only=True)
    first = FiguresOnRead(load, hardware, base, found, rows, fits=step["fits"],
                          **wall_figures(load, hardware, step["effective_step_seconds"], step["accelerators"]))
    if not has_deadline:
        return Candidates((first,)), fewest
    units, fits, wall = fewest_meeting(load, hardware, found, deadline, table_rungs(k_min, k_top))
    met = units * unit
    meeting = Columns(tensor, pipeline, met, met * per_node, np.full(met.shape, DEADLINE))
    return Candidates((first, FiguresOnRead(load, hardware, meeting, found, rows, fits=fits, wall_seconds=wall,
                                            accelerator_hours=accelerator_hours(wall, meeting.accelerators)))), fewest


def _base_block(load: Load, hardware: Hardware, figures: dict[str, Any], *, gather: bool) -> LayoutGrid:
    """The base candidates and their wall clock. For a sweep (`gather`), where their figures are one
    row for every scenario, a block gathered from that row: its wall clock, the only figure that varies
    by scenario, is spread only when read, and the compiled kernel makes it per cell instead, never
    laying out the (scenarios × candidates) wall clock, accelerator-hours and deadline mask."""
    if gather and all(np.ndim(value) == 2 and np.shape(value)[0] == 1 for value in figures.values()):
        return gathered(load, hardware, figures, np.arange(np.shape(figures["nodes"])[1])[np.newaxis, :])
    return with_wall(load, hardware, figures)


def _base_columns(found: Shapes, unit: Floats, per_node: int, k_min: Floats, tops: list[Floats]) -> Columns:
    """The memory minimum and the most each limit allows, per shape, as one block of candidates."""
    copies = len(tops) + 1

    def repeated(row: Any) -> Any:  # a row of one value per shape, once per copy (np.tile costs three times as much)
        return np.concatenate([row] * copies, axis=1)
    nodes = np.concatenate(np.broadcast_arrays(k_min, *tops), axis=1) * repeated(unit)
    origins = np.array([MEMORY] + [NODE_LIMIT] * len(tops)).repeat(found.count)[np.newaxis, :]
    return Columns(repeated(found.tensor[np.newaxis, :]), repeated(found.pipeline[np.newaxis, :]),
                   nodes, nodes * per_node, origins)


def _shapes(load: Load, accelerators_per_node: int, *, fixed_accelerators: int | None) -> Shapes:
    arch = load.architecture
    return shapes(accelerators_per_node=accelerators_per_node, layers=None if arch is None else arch.layers,
                  attention_heads=None if arch is None else arch.attention_heads, pins=load.pins,
                  zero_stages=load.zero_stages, fixed_accelerators=fixed_accelerators)


def _minimum_units(load: Load, hardware: Hardware, found: Shapes, unit: Floats) -> Floats:
    """Per scenario and shape, the fewest node units whose replicas hold the model at the most
    sharded ZeRO stage allowed (stages 2 and 3 only without pipelining, as gradient accumulation
    across micro-batches needs whole gradients); inf when no count does. Activations are taken
    at p micro-batches in flight, an upper bound. Only the model's size varies by scenario here, so
    each distinct size is solved once (a sweep over a few sizes)."""
    parameters = load.parameters
    if parameters is not None and np.ndim(parameters) and np.size(parameters) > 1:
        sizes, size_of = np.unique(np.asarray(parameters, dtype=np.float64).reshape(-1), return_inverse=True)
        if sizes.size < np.size(parameters):
            return _minimum_units(replace(load, parameters=sizes), hardware, found, unit)[size_of.reshape(-1)]
    tensor, pipeline = found.tensor[np.newaxis, :], found.pipeline[np.newaxis, :]
    psi = rank_parameters(load, tensor, pipeline)
    activation = activations(load, hardware, tensor, pipeline, in_flight=pipeline)
    best = np.full(np.broadcast_shapes(psi.shape, np.shape(activation)), np.inf)
    for stage in found.zero_stages:
        needed = minimum_data_parallel(parameters_per_rank=psi, activation_bytes=activation,
                                       memory_bytes=hardware.memory_bytes, stage=stage)
        allowed = (pipeline == 1.0) | (stage <= 1)
        best = np.minimum(best, np.where(allowed, needed, np.inf))
    per_unit = unit * hardware.accelerators_per_node / (tensor * pipeline)  # replicas per node unit
    return np.asarray(np.maximum(1.0, np.ceil(best / per_unit - 1e-9)))


def _batch_units(load: Load, hardware: Hardware, found: Shapes, unit: Floats) -> Floats:
    """The most node units whose replicas each still get a whole micro-batch: d·b ≤ batch."""
    sequences = batch_sequences(load)
    if sequences is None:
        return np.asarray(np.inf)
    per_unit = unit * hardware.accelerators_per_node / (found.tensor * found.pipeline)[np.newaxis, :]
    return np.asarray(np.maximum(1.0, np.floor(sequences / (load.micro_batch * per_unit) + 1e-9)))
