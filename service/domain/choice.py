"""Choosing among candidate layouts (model.md §5): which a term may take under its node limit and
deadline, the cheapest of those per scenario, and the chosen column of every figure.
"""

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from service.domain import compiled
from service.domain.arrays import ArrayLike, Bools, Floats, Ints, any_by_row, as_floats, broadcast
from service.domain.charges import Charges
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
    return _choice(layouts, cheapest, max(np.shape(cost)[0] if np.ndim(cost) else 1 for cost in costs))


def choose_priced(layouts: Eligible, blocks: Sequence[LayoutGrid], charges: Charges,
                  kernel: compiled.Kernel | None) -> Choice:
    """`choose` with the blocks priced by the term's charges: by the compiled `kernel` where the
    caller passes one (`compiled.py`, the same choice), else in numpy."""
    if kernel is None:
        return choose(layouts, [charges.cost(block) for block in blocks])
    cheapest = compiled.cheapest(layouts.meets, blocks, charges.form, kernel)
    return _choice(layouts, cheapest, cheapest.shape[0])


def _choice(layouts: Eligible, cheapest: Ints, rows: int) -> Choice:
    """The choice of the cheapest columns, or of the fastest where no column meets the deadline,
    over `rows` scenarios or as many as the layouts have."""
    index = cheapest if layouts.fastest is None else np.where(layouts.meets_deadline, cheapest, layouts.fastest)
    scenarios = (max(index.shape[0], rows),)
    return Choice(
        index=broadcast(index, scenarios).astype(np.int64, copy=False),
        any_fits=broadcast(layouts.any_fits, scenarios),
        meets_deadline=broadcast(layouts.meets_deadline, scenarios),
    )


def _any(blocks: Sequence[Bools]) -> Bools:
    """Per row, whether any column of any block is set (rows broadcast)."""
    return np.asarray(np.logical_or.reduce(np.broadcast_arrays(*(any_by_row(np.asarray(b)) for b in blocks))))


def _first_least(blocks: Sequence[Floats], widths: Sequence[int]) -> Ints:
    """Per row, the column of the least value of the blocks side by side, the first of equals (a NaN
    counts as the least): np.argmin of their concatenation, the blocks written into one array (rows
    broadcast), which costs less than one argmin per block and merging them (measured: 1.0 against
    1.3 ms for 12,500 rows of 10 and 8 columns)."""
    arrays = [np.asarray(block) for block in blocks]
    arrays = [array.reshape(-1, 1) if array.ndim < 2 else array for array in arrays]
    side_by_side = np.empty((max(array.shape[0] for array in arrays), sum(widths)))
    offset = 0
    for array, width in zip(arrays, widths, strict=True):
        side_by_side[:, offset:offset + width] = array
        offset += width
    return np.asarray(np.argmin(side_by_side, axis=1))


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
