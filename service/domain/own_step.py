"""The deadline search where every scenario has a step of its own (model.md §5): an input of the step
(the network, a failure rate, the model's size) drawn from a continuous range, so that no two scenarios
share a table (`deadline.py` solves those that do). Each scenario is searched alone, as it would be
quoted alone: its rungs in order until each shape meets the deadline, then the bracket below the first
that meets closed by `deadline.close_brackets`. Its candidates are blocks that hold only what prices and
chooses them (`FiguresOnRead`), and its steps run STEP_ROWS scenarios a pass (`step_figures_in_rows`), so
that a chunk's memory stays near what one pass holds.
"""

from collections.abc import Callable
from dataclasses import fields
from typing import Any

import numpy as np

from service.domain.arrays import Bools, Floats, Ints, broadcast, take_rows
from service.domain.deadline import close_brackets, shape_columns
from service.domain.guesses import TABLE_RUNGS
from service.domain.parallelism import Shapes
from service.domain.step import (
    FIGURE_NAMES,
    Columns,
    FiguresWhenRead,
    Hardware,
    Load,
    scenario_rows,
    step_figures,
    two_d,
    wall_figures,
)

STEP_ROWS = 2048  # scenarios per pass of `step_figures_in_rows`: a pass over every base candidate of
# scenarios that each have their own step holds about 25 KB a scenario of temporaries (10-venue catalog)


def step_figures_in_rows(load: Load, hardware: Hardware, c: Columns, found: Shapes, rows: int, *,
                         clock_only: bool = False) -> dict[str, Any]:
    """`step_figures` of candidates over `rows` scenarios, STEP_ROWS scenarios a pass: the same figures,
    each (rows, K) where there is more than one pass, with one pass's temporaries alive at a time (a
    step's arithmetic never mixes scenarios)."""
    if rows <= STEP_ROWS:
        return step_figures(load, hardware, c, found, clock_only=clock_only)
    passes = []
    for start in range(0, rows, STEP_ROWS):
        at = slice(start, min(start + STEP_ROWS, rows))
        figures = step_figures(take_rows(load, at, rows), take_rows(hardware, at, rows), take_rows(c, at, rows), found,
                               clock_only=clock_only)
        passes.append((at.stop - at.start, figures))
    return {name: np.concatenate([broadcast(figures[name], (count, np.shape(figures[name])[1]))
                                  for count, figures in passes]) for name in passes[0][1]}


class FiguresOnRead(FiguresWhenRead):
    """A block whose figures for pricing and choosing (its columns, whether each fits, the wall
    clock and accelerator-hours) are given, and every other figure is evaluated only when read:
    for the cells read (`cells`: the chosen layouts), or for the whole block when a figure is read
    whole. Where each scenario has its own step, the full figures of every candidate would cost
    more than all the pricing."""

    def __init__(self, load: Load, hardware: Hardware, columns: Columns, found: Shapes, scenarios: int,
                 **given: Any) -> None:
        width = np.shape(columns.nodes)[1]
        for name, value in ({f.name: getattr(columns, f.name) for f in fields(columns)} | given).items():
            object.__setattr__(self, name, two_d(value, width))
        object.__setattr__(self, "_inputs", (load, hardware, columns, found, scenarios))

    def _made(self, name: str) -> Any:
        """Every figure not given, evaluated for the whole block at once; `name` among them."""
        load, hardware, columns, found, _ = self._inputs
        for key, value in step_figures(load, hardware, columns, found).items():
            if key not in self.__dict__:
                object.__setattr__(self, key, value)
        return self.__dict__[name]

    def cells(self, rows: Ints, columns: Ints) -> Callable[[str], Any]:
        """The cells' figures: those the block holds taken now, the others evaluated for the cells
        alone when one of them is first read (a sweep reads few). The reader keeps neither the block
        nor any (scenarios × candidates) input, so a chosen layout does not hold its venue's candidate
        arrays alive after the choice (a sweep keeps every option's chosen layout to the end of its chunk)."""
        load, hardware, _, found, scenarios = self._inputs
        given = super().cells(rows, columns)
        held = {name: given(name) for name in FIGURE_NAMES if name in self.__dict__}
        at = Columns(*(np.asarray(held[f.name])[:, np.newaxis] for f in fields(Columns)))
        load, hardware = take_rows(load, rows, scenarios), take_rows(hardware, rows, scenarios)
        figures: dict[str, Any] = {}

        def read(name: str) -> Any:
            if name in held:
                return held[name]
            if not figures:
                figures.update(step_figures(load, hardware, at, found))
            return broadcast(figures[name], (rows.size, 1))[:, 0]
        return read


def fewest_meeting(load: Load, hardware: Hardware, found: Shapes, deadline: Floats,
                   rungs: Floats) -> tuple[Floats, Bools, Floats]:
    """Per scenario and shape, the fewest node units that meet the deadline when the step varies by
    scenario, found as the table path finds it: the first of the rungs (R, H, G) that meets it, then
    between it and the rung below, false position on wall(k) = α/k + β alternating with halving
    until the two counts are neighbours; the memory minimum where it already meets it, the top where
    no rung does. A count whose layout does not fit misses. A scenario's rungs are evaluated only
    until each of its shapes has met the deadline (`_first_meeting`), and its brackets only while one
    is open, cell by cell (`_closed_cells`). Returns the counts, and whether each layout fits and its
    wall clock there, as the search measured them."""
    rows = scenario_rows(load, hardware, deadline, rungs)
    target = np.broadcast_to(deadline.reshape(-1, 1), (rows, found.count))
    first, w_lo, w_hi, kept_wall, kept_fits = _first_meeting(load, hardware, found, deadline, rungs, rows)
    counts = np.broadcast_to(rungs, (rows, found.count, TABLE_RUNGS))
    reached = first < TABLE_RUNGS
    at = np.minimum(first, TABLE_RUNGS - 1)[..., np.newaxis]
    k_lo = np.take_along_axis(counts, np.maximum(at - 1, 0), axis=-1)[..., 0]
    k_hi = np.take_along_axis(counts, at, axis=-1)[..., 0]
    fewest, wall_there = _closed_cells(load, hardware, found, rows, target, k_lo, w_lo, k_hi, w_hi)
    # A count the bracket moved to met a finite deadline, so its layout fits and its wall clock is
    # the one measured; elsewhere the count is the rung kept.
    moved = fewest != k_hi
    return (np.asarray(np.where(reached, fewest, counts[..., -1])), np.asarray(moved | kept_fits),
            np.asarray(np.where(moved, wall_there, kept_wall)))


def _first_meeting(load: Load, hardware: Hardware, found: Shapes, deadline: Floats, rungs: Floats,
                   rows: int) -> tuple[Ints, Floats, Floats, Floats, Bools]:
    """Per scenario and shape (rows, H): the first rung that meets the deadline (TABLE_RUNGS where none
    does), the wall clock at the rung below it (inf below the first) and at it, and at the rung that
    met, else the top, the wall clock and whether the layout fits. The rungs are scanned in order, each
    for the scenarios with a shape still to meet the deadline and the shapes some of them have still to
    meet; the working rows are those scenarios', compacted as scenarios settle and written back once."""
    h = found.count
    first = np.full((rows, h), TABLE_RUNGS)
    w_lo, w_hi, kept_wall = (np.full((rows, h), np.inf) for _ in range(3))
    kept_fits = np.zeros((rows, h), dtype=bool)
    outputs = (first, w_lo, w_hi, kept_wall, kept_fits)
    work = outputs  # the scanning scenarios' rows: the outputs themselves until one settles
    scanning = np.arange(rows)
    target = deadline.reshape(-1, 1)
    below, below_shapes = np.full((rows, 1), np.inf), np.zeros(0, dtype=np.int64)  # the last rung's wall clock
    for j in range(TABLE_RUNGS):
        if not scanning.size:
            break
        s_first, s_lo, s_hi, s_wall, s_fits = work
        unmet = s_first == TABLE_RUNGS
        shapes = np.flatnonzero(unmet.any(axis=0))
        # A rung that is the same for every scenario stays one row: the figures that do not
        # depend on the scenario are then computed once.
        rung = rungs[:, shapes, j] if rungs.shape[0] == 1 else rungs[:, :, j][np.ix_(scanning, shapes)]
        raw, fits = _measured(load, hardware, found, rows, scanning, shapes, rung)
        wall = np.where(fits, raw, np.inf)
        unmet = unmet[:, shapes]
        # The cells that meet it now; each was unmet at the rung below, so its shape was measured there.
        fresh = unmet & (wall <= target)
        at_row, at = np.nonzero(fresh)
        s = shapes[at]
        cell = at_row * h + s  # flat indices: np.put along one axis costs less than a scatter along two
        np.put(s_first, cell, j)
        np.put(s_hi, cell, wall[fresh])
        if j:
            np.put(s_lo, cell, np.take(below, at_row * below.shape[1] + np.searchsorted(below_shapes, s)))
        np.put(s_wall, cell, raw[fresh])
        np.put(s_fits, cell, fits[fresh])
        if j == TABLE_RUNGS - 1:  # the cells that met at no rung keep the top's
            s_wall[:, shapes] = np.where(unmet, raw, s_wall[:, shapes])
            s_fits[:, shapes] = np.where(unmet, fits, s_fits[:, shapes])
        below, below_shapes = wall, shapes
        settled = ~(s_first == TABLE_RUNGS).any(axis=1)
        if settled.any():
            for whole, part in zip(outputs, work, strict=True):
                whole[scanning[settled]] = part[settled]
            left = ~settled
            work = tuple(part[left] for part in work)
            scanning, below = scanning[left], below[left]
            target = target[left] if target.shape[0] > 1 else target
    for whole, part in zip(outputs, work, strict=True):
        if part is not whole:
            whole[scanning] = part
    return first, w_lo, w_hi, kept_wall, kept_fits


def _closed_cells(load: Load, hardware: Hardware, found: Shapes, rows: int, target: Floats, k_lo: Floats,
                  w_lo: Floats, k_hi: Floats, w_hi: Floats) -> tuple[Floats, Floats]:
    """`close_brackets` on the (scenario, shape) cells whose bracket is open, side by side in one axis: a
    cell's count depends on its own bracket only, so each step measures the cells still open and
    nothing else. Elsewhere the count and the wall clock are k_hi and w_hi."""
    fewest, wall = np.array(k_hi, dtype=np.float64), np.array(w_hi, dtype=np.float64)
    cells = np.flatnonzero((k_hi - k_lo > 1.0) & (w_lo > target) & (w_hi <= target))
    if not cells.size:
        return fewest, wall
    row, shape = np.divmod(cells, found.count)

    def measure(k: Floats, open_bracket: Bools) -> Floats:
        g = np.full(k.shape, np.inf)
        at = np.flatnonzero(open_bracket)
        raw, fits = _measured_cells(load, hardware, found, rows, row[at], shape[at], k[at])
        g[at] = np.where(fits, raw, np.inf)
        return g

    bracket = (np.take(bound, cells) for bound in (k_lo, w_lo, k_hi, w_hi))
    closed, closed_wall = close_brackets(measure, target[row, shape], *bracket)
    np.put(fewest, cells, closed)
    np.put(wall, cells, closed_wall)
    return fewest, wall


def _measured(load: Load, hardware: Hardware, found: Shapes, rows: int, at: Ints, shapes: Ints,
              k: Floats) -> tuple[Floats, Bools]:
    """The wall clock of scenarios `at` (of `rows`) for the shapes `shapes` at node units k ((len(at) or
    1, len(shapes))), and whether each layout fits."""
    at_load, at_hardware = take_rows(load, at, rows), take_rows(hardware, at, rows)
    columns = shape_columns(found, shapes, k, hardware.accelerators_per_node)
    return _wall_and_fits(at_load, at_hardware, columns, found, (at.size, shapes.size))


def _measured_cells(load: Load, hardware: Hardware, found: Shapes, rows: int, at: Ints, shapes: Ints,
                    k: Floats) -> tuple[Floats, Bools]:
    """The wall clock of each cell i, scenario at[i] (of `rows`) in shape shapes[i] at k[i] node units,
    and whether its layout fits: (n,) arrays."""
    in_row = shape_columns(found, shapes, k, hardware.accelerators_per_node)  # cell i in column i: (1, n)
    columns = Columns(*(np.asarray(getattr(in_row, f.name)).reshape(-1, 1) for f in fields(Columns)))
    wall, fits = _wall_and_fits(take_rows(load, at, rows), take_rows(hardware, at, rows), columns, found,
                                (at.size, 1))
    return wall[:, 0], fits[:, 0]


def _wall_and_fits(load: Load, hardware: Hardware, columns: Columns, found: Shapes,
                   shape: tuple[int, int]) -> tuple[Floats, Bools]:
    """The wall clock of each column and whether it fits, as far as the wall clock needs, as `shape`."""
    step = step_figures_in_rows(load, hardware, columns, found, shape[0], clock_only=True)
    wall = wall_figures(load, hardware, step["effective_step_seconds"], step["accelerators"])["wall_seconds"]
    return np.asarray(np.broadcast_to(wall, shape)), np.asarray(np.broadcast_to(step["fits"], shape))
