"""Choosing among candidate layouts (model.md §5): which a term may take under its node limit and
deadline, the cheapest of those per scenario, and the chosen column of every figure.
"""

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from service.domain.arrays import ArrayLike, Bools, Floats, Ints, any_by_row, as_floats, broadcast
from service.domain.layout import DEADLINE, MEMORY, PINNED, Candidates, LayoutGrid
from service.domain.step import FiguresWhenRead


@dataclass(frozen=True)
class Eligible:
    """Which candidate layouts a term may take: those that hold the model within its node limit,
    and of them those that meet the deadline, block by block of the candidates (never copied into
    one grid). Terms of a venue with one limit share it."""

    meets: tuple[Bools, ...]  # per block, (R_b, K_b), R_b = 1 or S
    widths: tuple[int, ...]
    any_fits: Bools  # (R,): some layout within the limit holds the model
    meets_deadline: Bools  # (R,)
    fastest: Ints | None  # (R,): the fastest allowed layout; None when every row meets the deadline


def eligible(candidates: Candidates, *, node_limit: ArrayLike, deadline_seconds: ArrayLike) -> Eligible:
    limit = as_floats(node_limit).reshape(-1, 1)
    deadline = as_floats(deadline_seconds).reshape(-1, 1)
    allowed = [block.fits & (block.nodes <= limit) for block in candidates.blocks]
    walls = [np.asarray(block.wall_seconds) for block in candidates.blocks]
    meets = tuple(np.asarray(a & (w <= deadline)) for a, w in zip(allowed, walls, strict=True))
    any_fits = _any(allowed)
    meets_deadline = _any(meets)
    # The fallback layout is needed only where nothing meets the deadline, which is rare.
    fastest = None if meets_deadline.all() else _first_least(
        [np.where(a, w, np.inf) for a, w in zip(allowed, walls, strict=True)], candidates.widths)
    return Eligible(meets, tuple(candidates.widths), any_fits, meets_deadline, fastest)


@dataclass(frozen=True)
class Choice:
    """The column kept for each scenario and why: (S,) arrays."""

    index: Ints
    any_fits: Bools
    meets_deadline: Bools


def choose(layouts: Eligible, costs: Sequence[ArrayLike]) -> Choice:
    """Per scenario, the cheapest layout that meets the deadline (the first of equal costs); when
    none meets it, the fastest layout that fits (reported as missing the deadline). `costs` holds
    each block's cost of its candidates."""
    cheapest = _first_least([np.where(meets, cost, np.inf) for meets, cost in zip(layouts.meets, costs, strict=True)],
                            layouts.widths)
    index = cheapest if layouts.fastest is None else np.where(layouts.meets_deadline, cheapest, layouts.fastest)
    scenarios = (max(index.shape[0], *(np.shape(cost)[0] if np.ndim(cost) else 1 for cost in costs)),)
    return Choice(
        index=broadcast(index, scenarios).astype(np.int64, copy=False),
        any_fits=broadcast(layouts.any_fits, scenarios),
        meets_deadline=broadcast(layouts.meets_deadline, scenarios),
    )


def _any(blocks: Sequence[Bools]) -> Bools:
    """Per row, whether any column of any block is set (rows broadcast)."""
    return np.asarray(np.logical_or.reduce(np.broadcast_arrays(*(any_by_row(np.asarray(b)) for b in blocks))))


def _first_least(blocks: Sequence[Floats], widths: Sequence[int]) -> Ints:
    """Per row, the column of the least value of the blocks side by side, the first of equals, as
    np.argmin of their concatenation gives it (a NaN counts as the least)."""
    best_index: Ints | None = None
    best_value: Floats | None = None
    offset = 0
    for block, width in zip(blocks, widths, strict=True):
        values = np.asarray(block)
        values = values.reshape(-1, 1) if values.ndim < 2 else values
        values = np.broadcast_to(values, (values.shape[0], width))
        index = np.argmin(values, axis=1)
        value = values[np.arange(values.shape[0]), index]
        value = np.where(np.isnan(value), -np.inf, value)
        if best_index is None or best_value is None:
            best_index, best_value = index + offset, value
        else:
            better = value < best_value
            best_index, best_value = np.where(better, index + offset, best_index), np.where(better, value, best_value)
        offset += width
    assert best_index is not None
    return np.asarray(best_index)


def as_column(grid: LayoutGrid) -> LayoutGrid:
    """A chosen layout ((S,) arrays) as a grid of one candidate per scenario, (S, 1), so the
    grid formulas apply to it unchanged; each figure made when first read."""
    return FiguresWhenRead.of(lambda name: np.asarray(getattr(grid, name))[:, np.newaxis])


def decided_by(origin: int, *, missed_deadline: bool) -> str:
    """What decided a chosen layout: the memory minimum, the deadline, the pin, or, when the
    deadline is missed, the node limit (the fastest layout within it); a node-limit candidate
    chosen while the deadline is met was simply the cheapest."""
    if origin == PINNED:
        return "pinned"
    if missed_deadline:
        return "node_limit"
    return {MEMORY: "memory", DEADLINE: "deadline"}.get(origin, "cost")
