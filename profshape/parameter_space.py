"""The parameter space: named, bounded parameters and the linear map to the unit cube.

The shape families (:class:`profshape.shapes.ShapeFamily`), the calibration
problem (:class:`profshape.problem.CalibrationProblem`) and the plain search
space (:class:`profshape.search.SearchSpace`) all use these, so the bounds
check and the unit-cube map exist once. The search works in the unit cube
[0, 1]^d; the forward model gets physical values.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from .exceptions import InputDataError

__all__ = ["Parameter", "ParameterSpace", "bounds_of", "check_in_bounds", "from_unit", "to_unit"]


#: Relative slack allowed on bounds before a coefficient counts as outside them.
_BOUND_SLACK = 1e-9


@dataclass(frozen=True)
class Parameter:
    """One coefficient of a shape family.

    Parameters
    ----------
    name : str
        Identifier, e.g. ``"log10_inner_level"``; level parameters are log10 values.
    lower, upper : float
        Bounds in the parameter's own unit; ``lower < upper``.
    unit : str
        Unit of the parameter, e.g. ``"m"``, ``"log10(-)"`` or ``"log10(1/s)"``.
    description : str, default=""
        One line for reports.
    """

    name: str
    lower: float
    upper: float
    unit: str
    description: str = ""

    def __post_init__(self) -> None:
        lo, hi = float(self.lower), float(self.upper)
        if not (math.isfinite(lo) and math.isfinite(hi)):
            raise InputDataError(
                f"bounds of {self.name!r} must be finite; got [{self.lower!r}, {self.upper!r}]."
            )
        if not lo < hi:
            what = "zero-width" if lo == hi else "inverted"
            raise InputDataError(
                f"bounds of {self.name!r} are {what}: [{lo!r}, {hi!r}]; give lower < upper."
            )
        object.__setattr__(self, "lower", lo)
        object.__setattr__(self, "upper", hi)


def check_in_bounds(c: np.ndarray, parameters: Sequence[Parameter], owner: str) -> np.ndarray:
    """Check coefficients of shape (d,) or (n, d) are finite and within bounds.

    Values within a tiny relative slack of a bound are clipped onto it.

    Raises
    ------
    InputDataError
        Naming ``owner``, the parameter, the value (and row) and the bounds.
    """
    names = [p.name for p in parameters]
    b = bounds_of(parameters)
    c2 = np.atleast_2d(c)
    bad = ~np.isfinite(c2)
    if bad.any():
        row, col = np.argwhere(bad)[0]
        raise InputDataError(
            f"{owner}: coefficient {names[col]!r} is {float(c2[row, col])!r}"
            + (f" (row {row})" if c.ndim == 2 else "")
            + "; coefficients must be finite numbers."
        )
    slack = _BOUND_SLACK * (b[:, 1] - b[:, 0])
    outside = (c2 < b[:, 0] - slack) | (c2 > b[:, 1] + slack)
    if outside.any():
        row, col = np.argwhere(outside)[0]
        raise InputDataError(
            f"{owner}: coefficient {names[col]!r} = {float(c2[row, col])!r}"
            + (f" (row {row})" if c.ndim == 2 else "")
            + f" is outside its bounds [{float(b[col, 0])!r}, {float(b[col, 1])!r}] "
            f"[{parameters[col].unit}]; give a value inside them or widen the bounds."
        )
    c2 = np.clip(c2, b[:, 0], b[:, 1])
    return c2 if c.ndim == 2 else c2[0]


def bounds_of(parameters: Sequence[Parameter]) -> np.ndarray:
    """Bounds of shape (d, 2), columns lower and upper, of ``parameters``."""
    return np.array([[p.lower, p.upper] for p in parameters], dtype=float).reshape(-1, 2)


def _as_bounds_of(bounds: Any, x: Any) -> tuple[Any, Any]:
    """(bounds, x) as torch tensors of ``x``'s dtype and device when ``x`` is one, else numpy."""
    b = np.asarray(bounds, dtype=float)
    if type(x).__module__.startswith("torch"):
        import torch

        return torch.as_tensor(b, dtype=x.dtype, device=x.device), x
    return b, np.asarray(x, dtype=float)


def to_unit(x: Any, bounds: Any) -> Any:
    """Physical values (..., d) to the unit cube; a torch tensor stays one (differentiable)."""
    b, x = _as_bounds_of(bounds, x)
    return (x - b[:, 0]) / (b[:, 1] - b[:, 0])


def from_unit(u: Any, bounds: Any) -> Any:
    """Unit-cube values (..., d) to physical values; a torch tensor stays one."""
    b, u = _as_bounds_of(bounds, u)
    return b[:, 0] + u * (b[:, 1] - b[:, 0])


class ParameterSpace:
    """Names, units, bounds and the unit-cube map of an ordered tuple of parameters.

    A base for what owns parameters (a shape family, a calibration problem):
    subclasses provide :attr:`parameters`.
    """

    @property
    def parameters(self) -> tuple[Parameter, ...]:
        """The parameters, in coefficient order."""
        raise NotImplementedError

    @property
    def names(self) -> tuple[str, ...]:
        """Parameter names, in coefficient order."""
        return tuple(p.name for p in self.parameters)

    @property
    def units(self) -> tuple[str, ...]:
        """Parameter units, in coefficient order."""
        return tuple(p.unit for p in self.parameters)

    @property
    def bounds(self) -> np.ndarray:
        """Bounds of shape (d, 2): columns lower, upper."""
        return bounds_of(self.parameters)

    def to_unit(self, coefficients: Any) -> Any:
        """Coefficients (physical units, ..., d) to the unit cube [0, 1]^d (numpy or torch)."""
        return to_unit(coefficients, self.bounds)

    def from_unit(self, unit: Any) -> Any:
        """Unit-cube points (..., d) to coefficients (physical units; numpy or torch)."""
        return from_unit(unit, self.bounds)
