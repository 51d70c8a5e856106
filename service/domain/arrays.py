"""Array type aliases shared by the core."""

from typing import TypeAlias

import numpy as np
import numpy.typing as npt

Floats: TypeAlias = npt.NDArray[np.float64]
Ints: TypeAlias = npt.NDArray[np.int64]
Bools: TypeAlias = npt.NDArray[np.bool_]
ArrayLike: TypeAlias = npt.ArrayLike


def as_floats(value: ArrayLike) -> Floats:
    """View any scalar or sequence as a float64 array (no copy when it already is one)."""
    return np.asarray(value, dtype=np.float64)
