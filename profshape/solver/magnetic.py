"""Radial magnetic field profiles B(z) along the axis."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..exceptions import InputDataError

__all__ = ["BellField", "MagneticField", "TabulatedField"]


def _finite(name: str, value: object, *, positive: bool = False, nonneg: bool = False) -> float:
    try:
        v = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise InputDataError(f"{name} must be a number; got {value!r}.") from None
    if not math.isfinite(v):
        raise InputDataError(f"{name} must be finite; got {value!r}.")
    if positive and v <= 0.0:
        raise InputDataError(f"{name} must be > 0; got {v!r}.")
    if nonneg and v < 0.0:
        raise InputDataError(f"{name} must be >= 0; got {v!r}.")
    return v


@dataclass(frozen=True)
class BellField:
    """Bell-shaped (two-sided Gaussian) radial field peaking at ``peak_z_m``.

    .. math::
        B(z) = B_0 \\exp\\left[-\\left(\\frac{z - z_0}{w}\\right)^2\\right],
        \\quad w = w_u \\ (z < z_0), \\ w_d \\ (z \\ge z_0)

    Parameters
    ----------
    peak_T : float
        Peak radial field B_0 [T], > 0.
    peak_z_m : float
        Axial position of the peak z_0 [m], >= 0.
    width_upstream_m, width_downstream_m : float
        1/e half-widths towards the anode and towards the plume [m], > 0.
    """

    peak_T: float
    peak_z_m: float
    width_upstream_m: float
    width_downstream_m: float

    def __post_init__(self) -> None:
        object.__setattr__(self, "peak_T", _finite("magnetic_field.peak_T", self.peak_T, positive=True))
        object.__setattr__(
            self, "peak_z_m", _finite("magnetic_field.peak_z_m", self.peak_z_m, nonneg=True)
        )
        for name in ("width_upstream_m", "width_downstream_m"):
            object.__setattr__(
                self, name, _finite(f"magnetic_field.{name}", getattr(self, name), positive=True)
            )
        if self.peak_T > 1.0:
            raise InputDataError(
                f"magnetic_field.peak_T = {self.peak_T!r} T is implausibly large; give tesla "
                "(20 mT is 0.02)."
            )

    def __call__(self, z_m: np.ndarray) -> np.ndarray:
        """B [T] at ``z_m`` [m]."""
        z = np.asarray(z_m, dtype=float)
        w = np.where(z < self.peak_z_m, self.width_upstream_m, self.width_downstream_m)
        return self.peak_T * np.exp(-(((z - self.peak_z_m) / w) ** 2))

    def to_dict(self) -> dict[str, float]:
        """Plain-dict form (same keys as the TOML subtable)."""
        return {
            "peak_T": self.peak_T,
            "peak_z_m": self.peak_z_m,
            "width_upstream_m": self.width_upstream_m,
            "width_downstream_m": self.width_downstream_m,
        }


@dataclass(frozen=True, eq=False)
class TabulatedField:
    """Radial field given at points, linearly interpolated.

    Parameters
    ----------
    z_m : array_like of shape (n,)
        Strictly increasing axial positions [m], n >= 2; must span the
        solver's domain (checked by the solver against its grid).
    B_T : array_like of shape (n,)
        Field magnitude [T] at ``z_m``, finite and >= 0.
    """

    z_m: np.ndarray
    B_T: np.ndarray

    def __post_init__(self) -> None:
        try:
            z = np.asarray(self.z_m, dtype=float).ravel()
            b = np.asarray(self.B_T, dtype=float).ravel()
        except (TypeError, ValueError):
            raise InputDataError("magnetic_field: z_m and B_T must be numeric arrays.") from None
        if z.size < 2:
            raise InputDataError(f"magnetic_field.z_m needs at least 2 points; got {z.size}.")
        if z.shape != b.shape:
            raise InputDataError(
                f"magnetic_field: z_m has {z.size} points but B_T has {b.size}; give one "
                "field value per position."
            )
        if not (np.all(np.isfinite(z)) and np.all(np.isfinite(b))):
            raise InputDataError("magnetic_field: z_m and B_T must be finite.")
        if np.any(np.diff(z) <= 0.0):
            raise InputDataError("magnetic_field.z_m must be strictly increasing.")
        if np.any(b < 0.0):
            raise InputDataError("magnetic_field.B_T must be >= 0 (give the magnitude).")
        if np.max(b) > 1.0:
            raise InputDataError(
                f"magnetic_field.B_T peaks at {np.max(b)!r} T, implausibly large; give tesla."
            )
        z.setflags(write=False)
        b.setflags(write=False)
        object.__setattr__(self, "z_m", z)
        object.__setattr__(self, "B_T", b)

    def covers(self, z_m: np.ndarray, rel_tol: float = 1e-9) -> bool:
        """Whether the table spans all of ``z_m``."""
        span = self.z_m[-1] - self.z_m[0]
        z = np.asarray(z_m, dtype=float)
        tol = rel_tol * max(span, 1.0)
        return bool(z.min() >= self.z_m[0] - tol and z.max() <= self.z_m[-1] + tol)

    def __call__(self, z_m: np.ndarray) -> np.ndarray:
        """B [T] at ``z_m`` [m] (linear interpolation, end values held outside)."""
        return np.interp(np.asarray(z_m, dtype=float), self.z_m, self.B_T)

    def to_dict(self) -> dict[str, list[float]]:
        """Plain-dict form (same keys as the TOML subtable)."""
        return {"z_m": self.z_m.tolist(), "B_T": self.B_T.tolist()}


MagneticField = BellField | TabulatedField
