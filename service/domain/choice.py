"""Choosing among candidate layouts (model.md §5): which a term may take under its node limit and
deadline, the cheapest of those per scenario, and the chosen column of every figure.
"""

from dataclasses import dataclass, fields

import numpy as np

from service.domain.arrays import ArrayLike, Bools, Floats, Ints, as_floats, broadcast
from service.domain.layout import DEADLINE, MEMORY, PINNED, Candidates, LayoutGrid


@dataclass(frozen=True)
class Eligible:
    """Which candidate layouts a term may take: those that hold the model within its node limit,
    and of them those that meet the deadline. Terms of a venue with one limit share it."""

    allowed: Bools  # (R, K), R = 1 or S
    meets: Bools  # (R, K)
    any_fits: Bools  # (R,): some layout within the limit holds the model
    meets_deadline: Bools  # (R,)
    fastest: Ints | None  # (R,): the fastest allowed layout; None when every row meets the deadline


def eligible(candidates: Candidates, *, node_limit: ArrayLike, deadline_seconds: ArrayLike) -> Eligible:
    limit = as_floats(node_limit).reshape(-1, 1)
    deadline = as_floats(deadline_seconds).reshape(-1, 1)
    allowed = candidates.each(lambda block: block.fits & (block.nodes <= limit))
    wall = candidates.each(lambda block: block.wall_seconds)
    # Every input may vary by scenario or not: settle on one shape for all of them.
    shape = np.broadcast_shapes(allowed.shape, wall.shape, deadline.shape)
    allowed = np.broadcast_to(allowed, shape)
    meets = allowed & (wall <= deadline)
    meets_deadline = np.asarray(meets.any(axis=1))
    # The fallback layout is needed only where nothing meets the deadline, which is rare.
    fastest = None if meets_deadline.all() else np.argmin(np.where(allowed, wall, np.inf), axis=1)
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
