"""Where the line α/k + β through two rungs of a deadline table reaches an allowance, and each
shape's allowances (ascending) cut into runs of one guessed count (model.md §5): the arithmetic of
the table search in `deadline.py`, which evaluates the counts these guesses name.
"""

from dataclasses import dataclass

import numpy as np

from service.domain.arrays import Floats, Ints

TABLE_RUNGS = 16  # node counts per shape in the table the deadline is solved on
GUESS_SPLITS = 16  # pieces into which a range of allowances whose guesses may differ is split, per step
# The ranges of allowances a shape's rungs cut, in ascending order of allowance: the state of each (the
# first rung meeting it; TABLE_RUNGS for none, then again for the NaN allowances at the end), and the
# rung whose count it takes (TABLE_RUNGS: none, the count is interpolated).
_RANGE_STATES = np.array([*range(TABLE_RUNGS, -1, -1), TABLE_RUNGS])
_RANGE_FIXED = np.array([TABLE_RUNGS - 1, *[TABLE_RUNGS] * (TABLE_RUNGS - 1), 0, TABLE_RUNGS - 1])
_BELOW = np.maximum(np.arange(TABLE_RUNGS) - 1, 0)  # the rung below each (the first its own)


def line(k_lo: Floats, g_lo: Floats, k_hi: Floats, g_hi: Floats) -> tuple[Floats, Floats]:
    """(α, β) of the line g(k) = α/k + β through (k_lo, g_lo) and (k_hi, g_hi)."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        alpha = (g_lo - g_hi) / (1.0 / k_lo - 1.0 / k_hi)
        return alpha, g_hi - alpha / k_hi


def reaching(alpha: Floats, beta: Floats, k_lo: Floats, k_hi: Floats, target: Floats) -> Floats:
    """The count k at which α/k + β reaches the target, rounded up and kept inside (k_lo, k_hi]; k_hi
    where the line does not reach it."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        guess = np.ceil(alpha / (target - beta) - 1e-9)
    return np.asarray(np.minimum(np.maximum(np.where(np.isfinite(guess) & (guess > 0), guess, k_hi), k_lo + 1.0),
                                 k_hi))  # np.clip without its wrappers: counts, never a signed zero


def interpolated(k_lo: Floats, g_lo: Floats, k_hi: Floats, g_hi: Floats, target: Floats) -> Floats:
    """The count at which the line through (k_lo, g_lo) and (k_hi, g_hi) reaches the target (`reaching`)."""
    return reaching(*line(k_lo, g_lo, k_hi, g_hi), k_lo, k_hi, target)


@dataclass(frozen=True)
class Runs:
    """A shape's allowances (ascending) cut into runs that share the first rung meeting them
    (`state`) and the guessed count: run i covers positions start[i] to end[i] − 1 of shape
    shape[i]; the runs are in order of shape, then position, and cover every (shape, allowance)."""

    shape: Ints
    state: Ints
    start: Ints
    end: Ints
    count: Floats


def guess_runs(g: Floats, rungs: Floats, afforded: Floats, valid: int) -> Runs:
    """Per shape (a row of g, the effective step at each rung) and allowance (ascending, the first
    `valid` not NaN), the first rung whose running minimum meets the allowance (its state:
    TABLE_RUNGS where none does or the allowance is NaN) and the guessed count: the memory minimum
    at state 0, the top at TABLE_RUNGS, else where the line α/k + β through that rung and the one
    below reaches the allowance (`reaching`).

    A state holds over a range of allowances, found by locating each rung's running minimum among
    them. Within a range of one interior state the allowance lies between the two rungs' steps, so
    the guess falls or stays as the allowance grows (each operation of `reaching` is monotone):
    each range is split at GUESS_SPLITS points, and each piece whose ends differ again, until every
    change of guess lies between neighbours. The guess is evaluated at those points only, not at
    every allowance."""
    h, u = g.shape[0], afforded.size
    prefix = np.minimum.accumulate(g, axis=1)
    # Allowances from position reach[i, j] on are met by rung j's running minimum, so the ranges of
    # the states lie in the order of _RANGE_STATES between these edges.
    edges = np.empty((h, TABLE_RUNGS + 3), dtype=np.int64)
    edges[:, 0], edges[:, -2], edges[:, -1] = 0, valid, u
    edges[:, TABLE_RUNGS:0:-1] = afforded[:valid].searchsorted(prefix)
    seg_shape, seg_column = np.nonzero(edges[:, 1:] > edges[:, :-1])
    seg_state = _RANGE_STATES[seg_column]
    seg_start, seg_end = edges[seg_shape, seg_column], edges[seg_shape, seg_column + 1]
    alpha, beta = line(rungs[:, _BELOW], g[:, _BELOW], rungs, g)
    at = seg_shape * TABLE_RUNGS + np.minimum(seg_state, TABLE_RUNGS - 1)
    line_alpha, line_beta = alpha.reshape(-1)[at], beta.reshape(-1)[at]
    line_lo, line_hi = rungs[:, _BELOW].reshape(-1)[at], rungs.reshape(-1)[at]
    fixed = np.concatenate([rungs, np.full((h, 1), np.nan)], axis=1)[seg_shape, _RANGE_FIXED[seg_column]]

    def guess(position: Ints, segment: Ints | slice = slice(None)) -> Floats:
        """The guess at allowances `position` of the ranges `segment` (by default each range in turn)."""
        reached = reaching(line_alpha[segment], line_beta[segment], line_lo[segment], line_hi[segment],
                            afforded[position])
        return np.asarray(np.where(np.isnan(fixed[segment]), reached, fixed[segment]))

    segment = np.flatnonzero(np.isnan(fixed) & (seg_end - seg_start > 1))
    lo, hi = seg_start[segment], seg_end[segment] - 1
    changes = [(np.arange(seg_start.size), seg_start)]  # (range, position) where a run starts
    while segment.size:
        points = lo[:, np.newaxis] + (hi - lo)[:, np.newaxis] * np.arange(GUESS_SPLITS + 1) // GUESS_SPLITS
        of = np.broadcast_to(segment[:, np.newaxis], points.shape)
        value = guess(points, of)
        differ = value[:, 1:] != value[:, :-1]
        gap = points[:, 1:] - points[:, :-1]
        changes.append((of[:, 1:][differ & (gap == 1)], points[:, 1:][differ & (gap == 1)]))
        wide = differ & (gap > 1)
        segment, lo, hi = of[:, 1:][wide], points[:, :-1][wide], points[:, 1:][wide]
    if len(changes) == 1:  # each range is one run
        return Runs(seg_shape, seg_state, seg_start, seg_end, guess(seg_start))
    # A run ends where the next run of its range starts, else where its range ends.
    run_segment, start = (np.concatenate(part) for part in zip(*changes, strict=True))
    order = np.lexsort((start, run_segment))
    run_segment, start = run_segment[order], start[order]
    end = seg_end[run_segment]
    same = run_segment[1:] == run_segment[:-1]
    end[:-1][same] = start[1:][same]
    return Runs(seg_shape[run_segment], seg_state[run_segment], start, end, guess(start, run_segment))
