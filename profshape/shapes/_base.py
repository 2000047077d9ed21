"""The shape-family base class: coefficients in, anomalous profile out."""

from __future__ import annotations

import copy
import functools
from abc import ABC, abstractmethod
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from ..exceptions import InputDataError
from ..parameter_space import Parameter, ParameterSpace, check_in_bounds
from ..profile import AnomalousProfile, ProfileKind
from ._xp import namespace_of, to_backend

__all__ = ["Parameter", "ShapeFamily", "check_in_bounds"]


class ShapeFamily(ParameterSpace, ABC):
    """Base of all shape families.

    A family maps a coefficient vector of length :attr:`n_coefficients` to an
    anomalous profile along the axis z [m, from the anode], either a Bohm-like
    coefficient (``kind == "bohm"``: a multiple of the local electron
    cyclotron frequency) or an absolute frequency (``kind == "frequency"``, 1/s).

    Subclasses set :attr:`name` and :attr:`kind`, pass their parameters to
    ``__init__`` and implement :meth:`_log10_values` (or :meth:`_values`).

    Notes
    -----
    Coefficients are always in the physical units of :attr:`units` (levels are
    log10 values); the search works in the unit cube, see :meth:`to_unit`.
    """

    name: str = "shape"
    kind: ProfileKind = "bohm"

    def __init__(self, parameters: Sequence[Parameter]) -> None:
        params = tuple(parameters)
        names = [p.name for p in params]
        if len(set(names)) != len(names):
            raise InputDataError(f"{self.name}: parameter names must be unique; got {names}.")
        if not params:
            raise InputDataError(f"{self.name}: a family needs at least one parameter.")
        self._parameters = params

    # ------------------------------------------------------------------ metadata
    @property
    def parameters(self) -> tuple[Parameter, ...]:
        """The family's parameters, in coefficient order."""
        return self._parameters

    @property
    def n_coefficients(self) -> int:
        """Number of coefficients d."""
        return len(self._parameters)

    def with_bounds(self, **bounds: tuple[float, float]) -> ShapeFamily:
        """A copy with some bounds replaced, e.g. ``with_bounds(transition_z_m=(0.02, 0.03))``.

        Raises
        ------
        InputDataError
            For an unknown parameter name or invalid bounds.
        """
        new = copy.copy(self)
        params = list(self._parameters)
        for key, value in bounds.items():
            if key not in self.names:
                raise InputDataError(
                    f"{self.name}: unknown parameter {key!r} in bounds; known: {list(self.names)}."
                )
            try:
                lo, hi = (float(v) for v in value)
            except (TypeError, ValueError):
                raise InputDataError(
                    f"{self.name}: bounds of {key!r} must be a pair (lower, upper); got {value!r}."
                ) from None
            i = self.names.index(key)
            params[i] = Parameter(key, lo, hi, params[i].unit, params[i].description)
        new._parameters = tuple(params)
        return new

    def describe(self) -> list[dict[str, Any]]:
        """Parameters as a list of dicts (name, unit, lower, upper, description)."""
        return [
            {"name": p.name, "unit": p.unit, "lower": p.lower, "upper": p.upper,
             "description": p.description}
            for p in self._parameters
        ]

    def __repr__(self) -> str:
        return f"{type(self).__name__}(names={self.names!r}, kind={self.kind!r})"

    # ---------------------------------------------------------------- validation
    def validate(self, coefficients: Any) -> np.ndarray:
        """Check coefficients and return them as a float array.

        Parameters
        ----------
        coefficients : array_like of shape (d,) or (n, d), or mapping of name to value
            Coefficient vector(s) in physical units.

        Returns
        -------
        ndarray of shape (d,) or (n, d)

        Raises
        ------
        InputDataError
            Wrong length, NaN or inf, or a value outside its bounds (the message
            names the parameter, the value and the bounds).
        """
        if isinstance(coefficients, Mapping):
            coefficients = self.coefficients_from_dict(coefficients)
        xp = namespace_of(coefficients)
        c = np.asarray(
            coefficients.detach().cpu().numpy() if xp.is_torch else coefficients, dtype=float
        )
        if c.ndim not in (1, 2) or c.shape[-1] != self.n_coefficients:
            raise InputDataError(
                f"{self.name}: coefficients must have shape ({self.n_coefficients},) or "
                f"(n, {self.n_coefficients}) for parameters {list(self.names)}; got shape "
                f"{c.shape}."
            )
        return check_in_bounds(c, self._parameters, self.name)

    def coefficients_from_dict(self, values: Mapping[str, float]) -> np.ndarray:
        """Coefficient vector from a name → value mapping (all names required)."""
        missing = [n for n in self.names if n not in values]
        extra = [k for k in values if k not in self.names]
        if missing or extra:
            raise InputDataError(
                f"{self.name}: coefficients by name must give exactly {list(self.names)}; "
                + (f"missing {missing}" if missing else "")
                + ("; " if missing and extra else "")
                + (f"unknown {extra}" if extra else "")
                + "."
            )
        return np.array([float(values[n]) for n in self.names])

    def coefficient_dict(self, coefficients: Any) -> dict[str, float]:
        """Name → value mapping of one coefficient vector."""
        c = self.validate(coefficients)
        if c.ndim != 1:
            raise InputDataError(f"{self.name}: coefficient_dict takes one vector; got {c.shape}.")
        return {n: float(v) for n, v in zip(self.names, c, strict=True)}

    # ---------------------------------------------------------------- unit cube
    # to_unit and from_unit: see ParameterSpace
    def sample(self, n: int, seed: int | None = None) -> np.ndarray:
        """``n`` coefficient vectors drawn uniformly within the bounds, shape (n, d)."""
        rng = np.random.default_rng(seed)
        return self.from_unit(rng.random((int(n), self.n_coefficients)))

    # ---------------------------------------------------------------- evaluation
    def evaluate(self, coefficients: Any, z_m: Any, *, validate: bool = True) -> Any:
        """Profile values at axial positions.

        Parameters
        ----------
        coefficients : array_like or torch.Tensor of shape (d,) or (n, d)
            Coefficient vector(s) in physical units.
        z_m : array_like or torch.Tensor of shape (n_z,)
            Axial positions [m] from the anode.
        validate : bool, default=True
            Check the coefficients first (see :meth:`validate`).

        Returns
        -------
        ndarray or torch.Tensor of shape (n_z,) or (n, n_z)
            Bohm-like coefficient [-] or frequency [1/s], per :attr:`kind`;
            a torch tensor when ``coefficients`` is one.
        """
        xp = namespace_of(coefficients)
        if validate:
            self.validate(coefficients)
        c = coefficients if xp.is_torch else np.asarray(coefficients, dtype=float)
        z = to_backend(np.asarray(z_m.detach().cpu().numpy() if namespace_of(z_m).is_torch
                                  else z_m, dtype=float), c)
        if z.ndim != 1:
            raise InputDataError(f"z_m must be a 1-D array of positions [m]; got shape {z.shape}.")
        single = c.ndim == 1
        c2 = c[None, :] if single else c
        out = self._values(c2, z, xp)
        return out[0] if single else out

    def _values(self, c: Any, z: Any, xp: Any) -> Any:
        """Values for coefficients ``c`` (n, d) at ``z`` (n_z,) → (n, n_z)."""
        return 10.0 ** self._log10_values(c, z, xp)

    @abstractmethod
    def _log10_values(self, c: Any, z: Any, xp: Any) -> Any:
        """log10 of the profile for coefficients ``c`` (n, d) at ``z`` (n_z,) → (n, n_z)."""

    def profile(self, coefficients: Any, *, validate: bool = True) -> AnomalousProfile:
        """The :class:`~profshape.profile.AnomalousProfile` of one coefficient vector.

        ``validate=False`` skips the check (see :meth:`validate`) of coefficients
        that were checked already, e.g. by a calibration problem once per trial.
        """
        c = self.validate(coefficients) if validate else np.asarray(coefficients, dtype=float)
        if c.ndim != 1:
            raise InputDataError(f"{self.name}: profile takes one vector; got shape {c.shape}.")
        func = functools.partial(_evaluate_unchecked, self, c)
        return AnomalousProfile(
            kind=self.kind, function=func, family=self.name,
            coefficients={n: float(v) for n, v in zip(self.names, c, strict=True)},
        )


def _evaluate_unchecked(family: ShapeFamily, c: np.ndarray, z_m: np.ndarray) -> np.ndarray:
    """Module-level (picklable) evaluation used by :meth:`ShapeFamily.profile`."""
    return family.evaluate(c, z_m, validate=False)
