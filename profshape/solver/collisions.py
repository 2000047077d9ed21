"""Collision frequencies, Coulomb logarithm, Bohm diffusion and mobility.

Closed forms from the NRL Plasma Formulary (J. D. Huba, Naval Research
Laboratory, 2019 revision) and textbook cross-field transport (Goebel and
Katz 2008, *Fundamentals of Electric Propulsion*, ch. 3). Temperatures are in
eV, densities in m^-3, fields in T, frequencies in 1/s (angular for
gyration). The solver's inner loop uses numba copies of the same formulas
(:mod:`profshape.solver._kernels`); the test-suite checks both against
PlasmaPy.
"""

from __future__ import annotations

import numpy as np

from .. import constants
from ..profile import electron_gyrofrequency

__all__ = [
    "bohm_diffusion",
    "coulomb_logarithm",
    "cross_field_mobility",
    "electron_gyrofrequency",
    "electron_ion_collision_frequency",
    "hall_parameter",
]


def coulomb_logarithm(density_m3: np.ndarray | float, temperature_eV: np.ndarray | float) -> np.ndarray:
    """Electron-ion Coulomb logarithm (NRL Plasma Formulary, singly charged ions).

    .. math::
        \\ln\\Lambda = 23 - \\ln(n^{1/2} T_e^{-3/2})  \\quad (T_e < 10\\ \\mathrm{eV}), \\qquad
        \\ln\\Lambda = 24 - \\ln(n^{1/2} T_e^{-1})  \\quad (T_e \\ge 10\\ \\mathrm{eV}),

    with n in cm^-3 and T_e in eV; floored at 1.

    Parameters
    ----------
    density_m3 : array_like
        Electron density [m^-3].
    temperature_eV : array_like
        Electron temperature [eV].
    """
    n_cm3 = np.asarray(density_m3, dtype=float) * 1e-6
    t = np.asarray(temperature_eV, dtype=float)
    low = 23.0 - np.log(np.sqrt(n_cm3) * t**-1.5)
    high = 24.0 - np.log(np.sqrt(n_cm3) / t)
    return np.maximum(np.where(t < 10.0, low, high), 1.0)


def electron_ion_collision_frequency(
    density_m3: np.ndarray | float, temperature_eV: np.ndarray | float
) -> np.ndarray:
    """Electron-ion collision frequency [1/s] (NRL Plasma Formulary).

    .. math:: \\nu_{ei} = 2.91\\times10^{-6}\\, n[\\mathrm{cm^{-3}}]\\, \\ln\\Lambda\\, T_e^{-3/2}
    """
    n = np.asarray(density_m3, dtype=float)
    t = np.asarray(temperature_eV, dtype=float)
    return 2.91e-6 * n * 1e-6 * coulomb_logarithm(n, t) * t**-1.5


def bohm_diffusion(temperature_eV: np.ndarray | float, magnetic_field_T: np.ndarray | float) -> np.ndarray:
    """Bohm diffusion coefficient k T_e / (16 e B) [m^2/s] (Bohm 1949)."""
    t = np.asarray(temperature_eV, dtype=float)
    b = np.abs(np.asarray(magnetic_field_T, dtype=float))
    return t / (16.0 * b)


def hall_parameter(
    magnetic_field_T: np.ndarray | float, collision_frequency: np.ndarray | float
) -> np.ndarray:
    """Electron Hall parameter omega_ce / nu [-]."""
    return electron_gyrofrequency(magnetic_field_T) / np.asarray(collision_frequency, dtype=float)


def cross_field_mobility(
    collision_frequency: np.ndarray | float, magnetic_field_T: np.ndarray | float
) -> np.ndarray:
    """Classical cross-field electron mobility [m^2/(V s)].

    .. math:: \\mu_\\perp = \\frac{e}{m_e \\nu}\\, \\frac{1}{1 + \\Omega^2}, \\qquad
              \\Omega = \\omega_{ce} / \\nu

    (Goebel and Katz 2008, ch. 3).
    """
    nu = np.asarray(collision_frequency, dtype=float)
    omega = hall_parameter(magnetic_field_T, nu)
    return constants.e / (constants.m_e * nu) / (1.0 + omega**2)
