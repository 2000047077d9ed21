"""A box-bounded search space, for driving :class:`~profshape.search.Search` directly."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ..exceptions import InputDataError
from ..parameter_space import from_unit, to_unit

__all__ = ["SearchSpace"]


class SearchSpace:
    """Named parameters in a box, mapped linearly to the unit cube.

    A :class:`~profshape.problem.CalibrationProblem` offers the same
    attributes (``names``, ``bounds``, ``dim``, ``to_unit``, ``from_unit``);
    this class serves searches on other objectives (test functions, notebooks).

    Parameters
    ----------
    names : sequence of str
        Parameter names.
    bounds : array_like of shape (d, 2)
        Lower and upper bound of each parameter.
    """

    def __init__(self, names: Sequence[str], bounds: np.ndarray | Sequence[Sequence[float]]):
        self.names = tuple(str(n) for n in names)
        b = np.asarray(bounds, dtype=float)
        if b.shape != (len(self.names), 2):
            raise InputDataError(
                f"bounds must have shape ({len(self.names)}, 2) for names {list(self.names)}; "
                f"got {b.shape}."
            )
        if not np.all(np.isfinite(b)) or np.any(b[:, 1] <= b[:, 0]):
            raise InputDataError(
                f"bounds must be finite with lower < upper for every parameter; got {b.tolist()}."
            )
        if len(set(self.names)) != len(self.names):
            raise InputDataError(f"names must be unique; got {list(self.names)}.")
        self.bounds = b

    @property
    def dim(self) -> int:
        """Number of parameters."""
        return len(self.names)

    def to_unit(self, x: np.ndarray) -> np.ndarray:
        """Physical values (..., d) to the unit cube."""
        return np.asarray(to_unit(np.asarray(x, dtype=float), self.bounds))

    def from_unit(self, u: np.ndarray) -> np.ndarray:
        """Unit-cube values (..., d) to physical values."""
        return np.asarray(from_unit(np.asarray(u, dtype=float), self.bounds))
