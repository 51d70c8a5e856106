"""Choosing among candidate layouts (model.md §5): which a term may take under its node limit and
deadline, the cheapest of those per scenario, and the chosen column of every figure.
"""

from dataclasses import dataclass, fields
from typing import Any

import numpy as np

from service.domain.arrays import ArrayLike, Bools, Floats, Ints, as_floats, broadcast
from service.domain.layout import DEADLINE, MEMORY, PINNED, LayoutGrid


@dataclass(frozen=True)
class Eligible:
    """Which candidate layouts a term may take: those that hold the model within its node limit,
    and of them those that meet the deadline. Terms of a venue with one limit share it."""

    allowed: Bools  # (R, K), R = 1 or S
    meets: Bools  # (R, K)
    any_fits: Bools  # (R,): some layout within the limit holds the model
    meets_deadline: Bools  # (R,)
    fastest: Ints | None  # (R,): the fastest allowed layout; None when every row meets the deadline


def eligible(grid: LayoutGrid, *, node_limit: ArrayLike, deadline_seconds: ArrayLike) -> Eligible:
    limit = as_floats(node_limit).reshape(-1, 1)
    deadline = as_floats(deadline_seconds).reshape(-1, 1)
    # Every input may vary by scenario or not: settle on one shape for all of them.
    shape = np.broadcast_shapes(grid.wall_seconds.shape, grid.fits.shape, grid.nodes.shape, limit.shape,
                                deadline.shape)
    allowed = np.broadcast_to(grid.fits & (grid.nodes <= limit), shape)
    meets = allowed & (grid.wall_seconds <= deadline)
    meets_deadline = np.asarray(meets.any(axis=1))
    # The fallback layout is needed only where nothing meets the deadline, which is rare.
    fastest = None if meets_deadline.all() else np.argmin(np.where(allowed, grid.wall_seconds, np.inf), axis=1)
    return Eligible(allowed, meets, np.asarray(allowed.any(axis=1)), meets_deadline, fastest)


@dataclass(frozen=True)
class Choice:
    """The column kept for each scenario and why: (S,) arrays."""

    index: Ints
    any_fits: Bools
    meets_deadline: Bools


def choose(layouts: Eligible, cost: Floats) -> Choice:
    """Per scenario, the cheapest layout that meets the deadline (the faster of equal costs); when
    none meets it, the fastest layout that fits (reported as missing the deadline)."""
    cheapest = np.argmin(np.where(layouts.meets, cost, np.inf), axis=1)
    index = cheapest if layouts.fastest is None else np.where(layouts.meets_deadline, cheapest, layouts.fastest)
    scenarios = (max(index.shape[0], np.shape(cost)[0]),)
    return Choice(
        index=broadcast(index, scenarios).astype(np.int64, copy=False),
        any_fits=broadcast(layouts.any_fits, scenarios),
        meets_deadline=broadcast(layouts.meets_deadline, scenarios),
    )


class Picker:
    """The chosen column per scenario of arrays that broadcast to (S, K), as (S,) arrays of the
    same dtype (indexing, not broadcasting, so size-1 axes cost nothing)."""

    def __init__(self, index: Ints) -> None:
        self.index = index
        self._every_row = np.arange(index.shape[0])
        self._first = np.zeros_like(index)

    def __call__(self, values: ArrayLike) -> Any:
        array = np.asarray(values)
        if array.ndim < 2:
            return np.broadcast_to(array, self.index.shape).copy()
        rows = self._every_row if array.shape[0] > 1 else self._first
        columns = self.index if array.shape[1] > 1 else self._first
        return array[rows, columns]

    def grid(self, grid: LayoutGrid) -> LayoutGrid:
        """Every field of the grid at the chosen column: (S,) arrays."""
        return LayoutGrid(**{f.name: self(getattr(grid, f.name)) for f in fields(grid)})


def as_column(grid: LayoutGrid) -> LayoutGrid:
    """A chosen layout ((S,) arrays) as a grid of one candidate per scenario, (S, 1), so the
    grid formulas apply to it unchanged."""
    return LayoutGrid(**{f.name: np.asarray(getattr(grid, f.name))[:, np.newaxis] for f in fields(grid)})


def decided_by(origin: int, *, missed_deadline: bool) -> str:
    """What decided a chosen layout: the memory minimum, the deadline, the pin, or, when the
    deadline is missed, the node limit (the fastest layout within it); a node-limit candidate
    chosen while the deadline is met was simply the cheapest."""
    if origin == PINNED:
        return "pinned"
    if missed_deadline:
        return "node_limit"
    return {MEMORY: "memory", DEADLINE: "deadline"}.get(origin, "cost")
