"""Choosing among candidate layouts (model.md §5): which a term may take under its node limit and
deadline, the cheapest of those per scenario, and the chosen column of every figure.
"""

import functools
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from service.domain import compiled
from service.domain.arrays import ArrayLike, Bools, Floats, Ints, any_by_row, as_floats, broadcast
from service.domain.charges import Charges
from service.domain.gathered import Gathered, GatheredGrid
from service.domain.layout import DEADLINE, MEMORY, PINNED, Candidates, LayoutGrid
from service.domain.step import FiguresWhenRead


@dataclass(frozen=True)
class Eligible:
    """Which candidate layouts a term may take: those that hold the model within its node limit,
    and of them those that meet the deadline, block by block of the candidates (never copied into
    one grid). Terms of a venue with one limit share it. With the compiled kernel, a gathered block's
    are not spread at all: its `meets` is None, and the kernel finds them from its `gathered` form,
    the `limit` and the `deadline` as it prices the block."""

    meets: tuple[Bools | None, ...]  # per block, (R_b, K_b), R_b = 1 or S
    widths: tuple[int, ...]
    any_fits: Bools  # (R,): some layout within the limit holds the model
    meets_deadline: Bools  # (R,)
    fastest: Ints | None  # (R,): the fastest allowed layout; None when every row meets the deadline
    gathered: tuple[Gathered | None, ...]  # per block, its compact form where `meets` is None
    limit: Floats  # the node limit, (S, 1) or (1, 1)
    deadline: Floats  # the deadline in seconds, likewise


def eligible(candidates: Candidates, *, node_limit: ArrayLike, deadline_seconds: ArrayLike,
             kernel: compiled.Kernel | None = None) -> Eligible:
    """Which layouts a term under `node_limit` may take; with `kernel`, a gathered block's found
    compiled (`compiled.reach`) and never spread."""
    limit = as_floats(node_limit).reshape(-1, 1)
    deadline = as_floats(deadline_seconds).reshape(-1, 1)
    blocks = candidates.blocks
    forms = tuple(block.gathered() if kernel is not None and isinstance(block, GatheredGrid) else None
                  for block in blocks)
    meets: list[Bools | None] = []
    allowed_any, meets_any = [], []
    for block, form in zip(blocks, forms, strict=True):
        if form is not None and kernel is not None:
            some, met = compiled.reach(form, limit, deadline, kernel)
            meets.append(None)
        else:
            allowed = block.fits & (block.nodes <= limit)
            met_here = np.asarray(allowed & (np.asarray(block.wall_seconds) <= deadline))
            some, met = any_by_row(np.asarray(allowed)), any_by_row(met_here)
            meets.append(met_here)
        allowed_any.append(some)
        meets_any.append(met)
    any_fits, meets_deadline = _either(allowed_any), _either(meets_any)
    # The fallback layout is needed only where nothing meets the deadline, which is rare.
    fastest = None if meets_deadline.all() else _fastest(blocks, limit, candidates.widths)
    return Eligible(tuple(meets), tuple(candidates.widths), any_fits, meets_deadline, fastest, forms, limit, deadline)


def _fastest(blocks: Sequence[LayoutGrid], limit: Floats, widths: Sequence[int]) -> Ints:
    """Per scenario, the fastest layout within the node limit that holds the model."""
    return _first_least([np.where(block.fits & (block.nodes <= limit), np.asarray(block.wall_seconds), np.inf)
                         for block in blocks], widths)


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
    masks = [meets for meets in layouts.meets if meets is not None]
    assert len(masks) == len(costs), "a block left to the compiled kernel is priced by it (choose_priced)"
    cheapest = _first_least([np.where(meets, cost, np.inf) for meets, cost in zip(masks, costs, strict=True)],
                            layouts.widths)
    return _choice(layouts, cheapest, max(np.shape(cost)[0] if np.ndim(cost) else 1 for cost in costs))


def choose_priced(layouts: Eligible, blocks: Sequence[LayoutGrid], charges: Charges,
                  kernel: compiled.Kernel | None) -> Choice:
    """`choose` with the blocks priced by the term's charges: by the compiled `kernel` where the
    caller passes one (`compiled.py`, the same choice), else in numpy."""
    if kernel is None:
        return choose(layouts, [charges.cost(block) for block in blocks])
    return choose_priced_each(layouts, blocks, [charges], kernel)[0]


def choose_priced_each(layouts: Eligible, blocks: Sequence[LayoutGrid], charges: Sequence[Charges],
                       kernel: compiled.Kernel | None) -> list[Choice]:
    """`choose_priced` for each of several terms that may take the same candidates: with the kernel, those it
    can price in one scan of the candidates (`compiled.scanned_together`: an offer's on-demand and committed
    terms) priced so, the same choices."""
    if kernel is None:
        return [choose_priced(layouts, blocks, each, kernel) for each in charges]
    _, cheapest = compiled.least_costs(layouts.meets, layouts.gathered, layouts.widths, layouts.limit,
                                       layouts.deadline, blocks, [each.form for each in charges], kernel)
    return [_choice(layouts, row, row.shape[0]) for row in cheapest]


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


def _either(by_block: Sequence[Bools]) -> Bools:
    """Per row, whether it is set in any block's per-row flags (rows broadcast)."""
    return np.asarray(functools.reduce(np.logical_or, by_block))


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
    return np.asarray(side_by_side.argmin(axis=1))


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
