"""Electron-impact rate coefficients as functions of electron temperature.

Rates are Maxwellian averages ``<sigma v>`` [m^3/s] for a Maxwellian electron
distribution at temperature T_e [eV].

Sources
-------
Xenon
    Ionization and (lumped) excitation: the Maxwellian-averaged cross-section
    fits of Goebel and Katz 2008, *Fundamentals of Electric Propulsion*,
    appendix on ionization and excitation cross sections (coefficients
    recalled from that text, checked against the values in the project's
    REFERENCES file to ~30 %):

    - ionization, T_e < 5 eV: (3.97 + 0.643 T - 0.0368 T^2) exp(-12.127/T) 1e-20 m^2;
      T_e >= 5 eV: (-1.031e-4 T^2 + 6.386 exp(-12.127/T)) 1e-20 m^2;
    - excitation: 1.93e-19 exp(-11.6/T) / sqrt(T) m^2, each event costing 11.6 eV;

    times the electron mean speed sqrt(8 e T / (pi m_e)).
    Electron-neutral momentum transfer: the constant 2.5e-13 m^3/s used in
    1-D fluid models (Boeuf and Garrigues, J. Appl. Phys. 84, 3541, 1998).
Krypton
    Ionization: the Maxwellian average, computed here, of Lotz's empirical
    cross-section (W. Lotz, Z. Physik 206, 205, 1967; simplified form with
    a = 4.5e-14 cm^2 eV^2, outer shells 4p (q = 6, P = 14.00 eV) and
    4s (q = 2, P = 27.5 eV)). Lotz's simplified form overestimates the xenon
    rate by up to a factor of ~2 below 20 eV, so krypton rates carry that
    uncertainty. Excitation: the xenon fit's functional form with the
    threshold moved to krypton's lowest excited level (9.92 eV, NIST ASD),
    an approximation without a krypton-specific source. Momentum transfer:
    the xenon constant (assumption).

Above 100 eV (outside the range of the fits) the rates are held at their
100 eV values.
"""

from __future__ import annotations

import functools
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from .. import constants
from ..exceptions import InputDataError
from ..propellants import Propellant, get_propellant

__all__ = [
    "RateSet",
    "excitation_rate",
    "ionization_rate",
    "lotz_cross_section",
    "maxwellian_rate",
    "mean_electron_speed",
    "momentum_transfer_rate",
    "rate_set",
]

#: Temperature beyond which rates are held constant [eV].
_T_FIT_MAX = 100.0
_GL_X, _GL_W = np.polynomial.laguerre.laggauss(64)


def mean_electron_speed(temperature_eV: np.ndarray | float) -> np.ndarray:
    """Mean speed of a Maxwellian electron gas sqrt(8 e T / (pi m_e)) [m/s]."""
    t = np.asarray(temperature_eV, dtype=float)
    return np.sqrt(8.0 * constants.e * t / (np.pi * constants.m_e))


def maxwellian_rate(
    cross_section_m2: Callable[[np.ndarray], np.ndarray],
    temperature_eV: np.ndarray | float,
    threshold_eV: float = 0.0,
) -> np.ndarray:
    """Maxwellian average <sigma v> [m^3/s] of a cross-section sigma(E) [m^2].

    .. math::
        \\langle\\sigma v\\rangle = \\bar v \\int_0^\\infty \\sigma(xT)\\, x e^{-x}\\, dx,
        \\qquad \\bar v = \\sqrt{8 e T / (\\pi m_e)}

    evaluated by 64-point Gauss-Laguerre quadrature after shifting the
    variable to start at the threshold (exact for a constant cross-section).

    Parameters
    ----------
    cross_section_m2 : callable
        sigma(E) for electron energy E [eV] (array in, array out), zero below
        ``threshold_eV``.
    temperature_eV : array_like
        Electron temperature(s) [eV], > 0.
    threshold_eV : float, default=0.0
        Threshold energy of the process [eV].
    """
    t = np.atleast_1d(np.asarray(temperature_eV, dtype=float))
    x0 = threshold_eV / t  # (n_T,)
    y = _GL_X[None, :] + x0[:, None]
    sig = cross_section_m2(y * t[:, None])
    integral = np.exp(-x0) * np.sum(_GL_W[None, :] * sig * y, axis=1)
    out = mean_electron_speed(t) * integral
    return out.reshape(np.shape(temperature_eV))


def lotz_cross_section(
    energy_eV: np.ndarray, shells: tuple[tuple[float, float], ...], a_cm2_eV2: float = 4.5e-14
) -> np.ndarray:
    """Lotz's simplified ionization cross-section [m^2] (Lotz 1967).

    .. math:: \\sigma(E) = \\sum_i a\\, q_i \\frac{\\ln(E/P_i)}{E P_i}, \\quad E > P_i

    Parameters
    ----------
    energy_eV : ndarray
        Electron energy [eV].
    shells : tuple of (q_i, P_i)
        Number of electrons and binding energy [eV] of each sub-shell.
    a_cm2_eV2 : float, default=4.5e-14
        Lotz's constant [cm^2 eV^2].
    """
    e = np.asarray(energy_eV, dtype=float)
    total = np.zeros_like(e)
    for q, p in shells:
        ee = np.maximum(e, p)
        total += np.where(e > p, a_cm2_eV2 * q * np.log(ee / p) / (ee * p), 0.0)
    return total * 1e-4


def _xe_ionization(t: np.ndarray) -> np.ndarray:
    low = (3.97 + 0.643 * t - 0.0368 * t**2) * np.exp(-12.127 / t)
    high = -1.031e-4 * t**2 + 6.386 * np.exp(-12.127 / t)
    return np.where(t < 5.0, low, high) * 1e-20 * mean_electron_speed(t)


def _excitation_fit(t: np.ndarray, threshold_eV: float) -> np.ndarray:
    return 1.93e-19 * np.exp(-threshold_eV / t) / np.sqrt(t) * mean_electron_speed(t)


_KR_SHELLS = ((6.0, 14.00), (2.0, 27.5))
_EXCITATION_ENERGY_EV = {"xenon": 11.6, "krypton": 9.92}
_MOMENTUM_RATE = {"xenon": 2.5e-13, "krypton": 2.5e-13}


def _supported(propellant: str | Propellant) -> Propellant:
    prop = get_propellant(propellant)
    if prop.name not in _EXCITATION_ENERGY_EV:
        raise InputDataError(
            f"propellant: the built-in solver has rate data for "
            f"{sorted(_EXCITATION_ENERGY_EV)} only; got {prop.name!r}."
        )
    return prop


def ionization_rate(propellant: str | Propellant, temperature_eV: np.ndarray | float) -> np.ndarray:
    """Ionization rate coefficient [m^3/s] at T_e [eV] (sources in the module docstring)."""
    prop = _supported(propellant)
    t = np.clip(np.asarray(temperature_eV, dtype=float), 1e-3, _T_FIT_MAX)
    if prop.name == "xenon":
        return _xe_ionization(t)
    return maxwellian_rate(
        lambda e: lotz_cross_section(e, _KR_SHELLS), t, threshold_eV=_KR_SHELLS[0][1]
    )


def excitation_rate(propellant: str | Propellant, temperature_eV: np.ndarray | float) -> np.ndarray:
    """Lumped excitation rate coefficient [m^3/s] at T_e [eV]."""
    prop = _supported(propellant)
    t = np.clip(np.asarray(temperature_eV, dtype=float), 1e-3, _T_FIT_MAX)
    return _excitation_fit(t, _EXCITATION_ENERGY_EV[prop.name])


def momentum_transfer_rate(
    propellant: str | Propellant, temperature_eV: np.ndarray | float
) -> np.ndarray:
    """Electron-neutral momentum-transfer rate coefficient [m^3/s] (constant)."""
    prop = _supported(propellant)
    return np.full(np.shape(temperature_eV), _MOMENTUM_RATE[prop.name])


@dataclass(frozen=True)
class RateSet:
    """Rates tabulated on a uniform temperature grid for the solver's inner loop.

    Attributes
    ----------
    t0_eV, dt_eV : float
        First temperature and spacing of the table [eV].
    ionization_m3_s, energy_loss_eV_m3_s, momentum_m3_s : ndarray
        Ionization rate, inelastic energy-loss coefficient
        (k_iz E_iz + k_ex E_ex) and momentum-transfer rate.
    ionization_energy_eV, excitation_energy_eV : float
        Energy cost of one ionization and of one excitation [eV].
    """

    t0_eV: float
    dt_eV: float
    ionization_m3_s: np.ndarray
    energy_loss_eV_m3_s: np.ndarray
    momentum_m3_s: np.ndarray
    ionization_energy_eV: float
    excitation_energy_eV: float


@functools.lru_cache(maxsize=8)
def rate_set(propellant: str, t_max_eV: float = 400.0, dt_eV: float = 0.05) -> RateSet:
    """Tabulated rates for ``propellant`` from 0 to ``t_max_eV`` [eV]."""
    prop = _supported(propellant)
    t = np.arange(0.0, t_max_eV + 0.5 * dt_eV, dt_eV)
    tt = np.maximum(t, 1e-3)
    kiz = ionization_rate(prop, tt)
    kex = excitation_rate(prop, tt)
    kiz[0] = kex[0] = 0.0
    eex = _EXCITATION_ENERGY_EV[prop.name]
    loss = kiz * prop.ionization_energy_eV + kex * eex
    for arr in (kiz, loss):
        arr.setflags(write=False)
    ken = momentum_transfer_rate(prop, tt)
    ken.setflags(write=False)
    return RateSet(0.0, dt_eV, kiz, loss, ken, prop.ionization_energy_eV, eex)
