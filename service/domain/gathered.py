"""Candidate blocks gathered from one row of distinct candidates (model.md §5): the deadline search
evaluates each distinct (shape, node count) once, in a one-row table, and each scenario takes its
candidates from it by column (`deadline.py`). A figure is spread over the scenarios only when read;
the compiled kernel (`compiled.py`) reads the table through the columns and spreads none.
"""

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from service.domain.arrays import Bools, Floats, Ints, is_every_row
from service.domain.step import FIGURES, FiguresWhenRead, Hardware, Load, scenario_terms, wall_figures


@dataclass(frozen=True)
class Gathered:
    """A gathered block as the compiled kernel reads it (`compiled.py`): candidate j of scenario s is
    `rows[row_of[s], j]` of the one-row table's columns, whose nodes, accelerators, fits and effective
    step are given; its wall clock is steps[s] × effective step + staging[s]. (S,) and (C,) arrays. A
    row's columns beyond `kept` of it are dominated (`dominance.deadline_rows`): never chosen, never read."""

    rows: Ints  # (R, K)
    kept: Ints  # (R,)
    row_of: Ints  # (S,)
    nodes: Floats
    accelerators: Floats
    fits: Bools
    effective_step_seconds: Floats
    steps: Floats  # (S,) or (1,)
    staging: Floats  # (S,) or (1,)


class GatheredGrid(FiguresWhenRead):
    """A block whose figures are drawn from one row of distinct candidates, `table[name][0, column]`
    for an (S, K) array of columns, `rows` itself or, with `row_of`, each scenario's row of the
    distinct `rows` (each figure is then taken for those rows first and spread by whole rows). A figure
    is gathered only when it is read (the wall clock and accelerator-hours together, from the gathered
    effective step), and `cells` reads single cells straight from the table, so the many figures that
    only the chosen layout needs are never spread over every scenario; the compiled pricing reads
    `gathered()` and spreads none."""

    def __init__(self, load: Load, hardware: Hardware, table: dict[str, Any], rows: Ints,
                 row_of: Ints | None = None, kept: Ints | None = None) -> None:
        object.__setattr__(self, "_table", table)
        object.__setattr__(self, "_rows", rows)
        object.__setattr__(self, "_kept", kept)
        object.__setattr__(self, "_row_of", row_of)
        object.__setattr__(self, "_inputs", (load, hardware))

    @property
    def width(self) -> int:
        """Each scenario's number of candidates, read from the columns: nothing spread."""
        return int(np.shape(self._rows)[1])

    def _spread(self, figure: Any) -> Any:
        """A one-row figure of the table at every scenario's columns."""
        row_of = self._row_of
        if row_of is None:
            return np.asarray(figure)[0][self._rows]
        return np.take(np.asarray(figure)[0][self._rows], row_of, axis=0)

    def _made(self, name: str) -> Any:
        table = self.__dict__.get("_table")
        if table is None:
            raise AttributeError(name)
        if name in ("wall_seconds", "accelerator_hours"):
            load, hardware = self._inputs
            wall = wall_figures(load, hardware, self._spread(table["effective_step_seconds"]),
                                self.accelerators)
            object.__setattr__(self, "wall_seconds", wall["wall_seconds"])
            object.__setattr__(self, "accelerator_hours", wall["accelerator_hours"])
            return wall[name]
        if name not in table:
            raise AttributeError(name)
        return self._spread(table[name])

    def gathered(self) -> Gathered:
        """The block as the compiled kernel reads it, nothing spread."""
        load, hardware = self._inputs
        table = self._table
        steps, staging = scenario_terms(load, hardware)
        rows = np.ascontiguousarray(self._rows, dtype=np.int64)
        kept = (np.full(rows.shape[0], rows.shape[1], dtype=np.int64) if self._kept is None
                else np.minimum(np.asarray(self._kept, dtype=np.int64), rows.shape[1]))
        row_of = np.arange(rows.shape[0]) if self._row_of is None else np.asarray(self._row_of, dtype=np.int64)
        nodes, accelerators, step = (np.ascontiguousarray(table[name][0], dtype=np.float64) for name in (
            "nodes", "accelerators", "effective_step_seconds"))
        fits = np.ascontiguousarray(table["fits"][0], dtype=bool)
        return Gathered(rows, kept, row_of, nodes, accelerators, fits, step, steps.reshape(-1), staging.reshape(-1))

    def cells(self, rows: Ints, columns: Ints) -> Callable[[str], Any]:
        if rows.shape == columns.shape == (1,):  # one cell (a quote's chosen layout): every figure read at once
            return self.figures_at(int(rows[0]), int(columns[0])).__getitem__
        distinct, row_of = self._rows, self._row_of  # scenario s's columns: distinct[row_of[s]]
        if row_of is None:
            cell = distinct[rows if distinct.shape[0] > 1 else np.zeros_like(rows), columns]
        elif row_of.size == rows.size > 1 and is_every_row(rows):  # every scenario's row, in order: as it is
            cell = distinct[row_of, columns]
        else:
            cell = distinct[row_of[rows if row_of.size > 1 else np.zeros_like(rows)], columns]
        spread = super().cells(rows, columns)
        timed: dict[str, Any] = {}

        def read(name: str) -> Any:
            if name in self.__dict__:
                return spread(name)
            if name in ("wall_seconds", "accelerator_hours"):  # the cells' own: their scenarios' wall clock
                if not timed:
                    load, hardware = self._inputs
                    step, used = (np.asarray(self._table[figure])[0][cell][:, np.newaxis]
                                  for figure in ("effective_step_seconds", "accelerators"))
                    timed.update(wall_figures(load, hardware, step, used, rows))
                return np.asarray(timed[name])[:, 0]
            if name not in self._table:
                return spread(name)
            return np.asarray(self._table[name])[0][cell]
        return read

    def figures_at(self, row: int, column: int) -> dict[str, Any]:
        """Every figure of one cell, as `cells` reads one: the table's figures as (1,) slices of its row, the
        wall clock the cell's own, and any figure already spread over the block read there."""
        distinct, row_of = self._rows, self._row_of
        at = row if row_of is None else int(row_of[row if row_of.size > 1 else 0])
        cell = int(distinct[at if distinct.shape[0] > 1 else 0, column])
        table, made = self._table, self.__dict__
        figures = {name: np.asarray(table[name])[0, cell:cell + 1] for name in FIGURES
                   if name in table and name not in made}
        if not ("wall_seconds" in made and "accelerator_hours" in made):
            load, hardware = self._inputs
            step, used = (np.asarray(table[name])[:, cell:cell + 1]
                          for name in ("effective_step_seconds", "accelerators"))
            wall = wall_figures(load, hardware, step, used, np.array([row]))
            figures.update({name: np.asarray(value)[:, 0] for name, value in wall.items() if name not in made})
        if len(figures) < len(FIGURES):  # a figure spread over the block already, or none the block can make
            spread = super().cells(np.array([row]), np.array([column]))
            figures.update({name: spread(name) for name in FIGURES if name not in figures})
        return figures


def gathered(load: Load, hardware: Hardware, table: dict[str, Any], rows: Ints,
             row_of: Ints | None = None, kept: Ints | None = None) -> GatheredGrid:
    """The block of the candidates `table[name][0, column]`, each figure gathered when read. `column`
    is `rows`, a row per scenario, or with `row_of`, each scenario's row of the distinct `rows`; `kept`, per
    row, how many of its first columns can be chosen (the others dominated), where that is known."""
    return GatheredGrid(load, hardware, table, rows, row_of, kept)
