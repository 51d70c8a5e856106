"""Array type aliases shared by the core."""

from typing import Any, TypeAlias

import numpy as np
import numpy.typing as npt

Floats: TypeAlias = npt.NDArray[np.float64]
Ints: TypeAlias = npt.NDArray[np.int64]
Bools: TypeAlias = npt.NDArray[np.bool_]
ArrayLike: TypeAlias = npt.ArrayLike


def as_floats(value: ArrayLike) -> Floats:
    """View any scalar or sequence as a float64 array (no copy when it already is one)."""
    return np.asarray(value, dtype=np.float64)


def broadcast(value: ArrayLike, shape: tuple[int, ...]) -> Any:
    """`value` as a read-only array of `shape`; as it is when it has that shape already (a quote
    makes thousands of these, so the common case skips numpy's broadcasting machinery)."""
    array = np.asarray(value)
    return array if array.shape == shape else np.broadcast_to(array, shape)


def largest_count(limit: ArrayLike) -> float:
    """The largest node count a limit allows in any scenario, at least 1; NaN entries are ignored."""
    return float(np.fmax.reduce(np.ravel(as_floats(limit)), initial=1.0))
