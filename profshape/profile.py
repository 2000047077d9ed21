"""The anomalous collision frequency profile handed to a forward model."""

from __future__ import annotations

import functools
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Literal

import numpy as np

from . import constants
from .exceptions import InputDataError

__all__ = ["AnomalousProfile", "ProfileKind", "electron_gyrofrequency"]

ProfileKind = Literal["bohm", "frequency"]


def electron_gyrofrequency(magnetic_field_T: np.ndarray | float) -> np.ndarray:
    """Electron cyclotron (gyro) angular frequency e|B|/m_e [rad/s].

    Parameters
    ----------
    magnetic_field_T : array_like
        Magnetic field magnitude [T].
    """
    gyro: np.ndarray = constants.e * np.abs(np.asarray(magnetic_field_T, dtype=float)) / constants.m_e
    return gyro


@dataclass(frozen=True)
class AnomalousProfile:
    """An anomalous collision frequency profile along the axis.

    Parameters
    ----------
    kind : {"bohm", "frequency"}
        ``"bohm"``: :attr:`function` returns a Bohm-like coefficient, the
        anomalous frequency being that coefficient times the local electron
        cyclotron frequency. ``"frequency"``: it returns the frequency [1/s].
    function : callable
        ``function(z_m) -> values`` on any 1-D array of axial positions [m]
        measured from the anode.
    coefficients : dict of str to float, optional
        The shape coefficients that made this profile, by name (for logs).
    family : str, optional
        Name of the shape family that made it.
    """

    kind: ProfileKind
    function: Callable[[np.ndarray], np.ndarray]
    coefficients: dict[str, float] = field(default_factory=dict)
    family: str = ""

    def __post_init__(self) -> None:
        if self.kind not in ("bohm", "frequency"):
            raise InputDataError(
                f"AnomalousProfile.kind must be 'bohm' or 'frequency'; got {self.kind!r}."
            )

    def __call__(self, z_m: np.ndarray) -> np.ndarray:
        """Profile values (coefficient or 1/s, per :attr:`kind`) at ``z_m`` [m]."""
        return np.asarray(self.function(np.asarray(z_m, dtype=float)), dtype=float)

    def scaled(self, factor: float, **coefficients: float) -> AnomalousProfile:
        """This profile times ``factor`` (picklable), with extra coefficients noted."""
        return AnomalousProfile(
            kind=self.kind,
            function=functools.partial(_scaled, self.function, float(factor)),
            coefficients={**self.coefficients, **coefficients},
            family=self.family,
        )

    def frequency(self, z_m: np.ndarray, magnetic_field_T: np.ndarray) -> np.ndarray:
        """Anomalous collision frequency [1/s] at ``z_m`` given the field there [T]."""
        values = self(z_m)
        if self.kind == "bohm":
            return np.asarray(values * electron_gyrofrequency(magnetic_field_T))
        return np.asarray(values)


def _scaled(function: Callable[[np.ndarray], np.ndarray], factor: float, z: np.ndarray) -> np.ndarray:
    """Module-level (picklable) product of a profile function and a factor."""
    return factor * np.asarray(function(z), dtype=float)
