"""Candidate layouts that are never chosen (model.md §5), dropped before a sweep prices them.

A column dominates a later one when it fits wherever the later one does, on no more nodes and
accelerators, with a step no longer. The later one is then never chosen: the earlier is allowed
wherever it is, meets every deadline it meets, and costs no more on every term, as each term's cost
is non-decreasing in the nodes, the accelerators and the wall clock (and so the accelerator-hours)
at non-negative prices (`terms.py`); the choice keeps the first of equals, and the fastest fallback
the first of equally fast. Dominance is transitive, so whatever dominates a dropped column is still
there, before it. A column whose step is not finite is never dominated, as it may price to NaN.

Finding the base candidates' costs a fixed ~0.06 ms per venue, and the deadline candidates' one pass
over the distinct allowances and a comparison within each distinct row of them; pricing a column
costs a pass over every scenario for each term.
Below PRUNED_FROM scenarios (a quote) every column is kept.
"""

from typing import Any

import numpy as np

from service.domain.arrays import Bools, Ints

FIGURES = ("effective_step_seconds", "nodes", "accelerators", "fits")
PRUNED_FROM = 256  # measured on the demo sweep: even at about 128 scenarios, 13% faster at 512


def dominance(earlier: dict[str, Any], later: dict[str, Any]) -> Bools:
    """(R, K_a, K_b): per row, whether column i of `earlier` dominates column j of `later`, were it
    to come before it (rows broadcast)."""
    step, nodes, accelerators, fits = (np.asarray(earlier[name])[:, :, np.newaxis] for name in FIGURES)
    step_j, nodes_j, accelerators_j, fits_j = (np.asarray(later[name])[:, np.newaxis, :] for name in FIGURES)
    return np.asarray((fits | ~fits_j) & (nodes <= nodes_j) & (accelerators <= accelerators_j) & (step <= step_j)
                      & np.isfinite(step_j))


def single_row(figures: dict[str, Any]) -> bool:
    """Whether the figures dominance reads are one row for every scenario."""
    return all(np.shape(figures[name])[0] == 1 for name in FIGURES)


def in_order(figures: dict[str, Any]) -> tuple[Ints, int]:
    """Per row of the candidates' figures, its columns with those an earlier column dominates moved
    after the others, in order, (R, K); and the most columns a row keeps."""
    width = np.shape(figures["nodes"])[1]
    order, kept = _ordered(np.asarray((dominance(figures, figures) & _before(width)).any(axis=1)))
    return order, int(np.max(kept, initial=0))


def undominated(figures: dict[str, Any]) -> dict[str, Any]:
    """One row of candidates' figures without the columns an earlier one dominates."""
    order, kept = in_order(figures)
    if kept == order.shape[1]:
        return figures
    columns = order[0, :kept]  # ascending: the order keeps the undominated in order
    return {name: np.asarray(value)[:, columns] for name, value in figures.items()}


def deadline_rows(first: dict[str, Any], table: dict[str, Any], rows: Ints) -> tuple[Ints, Ints]:
    """The deadline candidates' rows (`rows`: (R, H) into the one-row `table`, a row per run of
    allowances whose candidates are the same) each with the candidates that a base candidate (`first`,
    one row) or the row's candidate of an earlier shape dominates moved after the others, in order;
    and how many columns each row keeps, (R,) (the compiled scan reads no further: about half of a
    row's columns, where the rows are cut to the most any keeps). The base candidates come first."""
    by_base = dominance(first, table)[0].any(axis=0)[rows]
    in_rows = {name: np.asarray(table[name])[0][rows] for name in FIGURES}  # each row's candidates, (R, H)
    pairs = dominance(in_rows, in_rows)  # [r, h', h]
    order, kept = _ordered(np.asarray(by_base | (pairs & _before(rows.shape[1])).any(axis=1)))
    return np.take_along_axis(rows, order, axis=1), kept


def _before(width: int) -> Bools:
    """[i, j]: column i comes before column j."""
    return np.triu(np.ones((width, width), dtype=bool), 1)


def _ordered(dominated: Bools) -> tuple[Ints, Ints]:
    """Per row, its columns with the dominated moved last, in order, and how many it keeps."""
    return (np.argsort(dominated, axis=1, kind="stable"),
            np.asarray(dominated.shape[1] - np.count_nonzero(dominated, axis=1), dtype=np.int64))
