"""Ion-neutral collisions: resonant charge exchange and elastic momentum transfer.

Sources
-------
Charge exchange, xenon
    Miller, Pullins, Levandier, Chiu and Dressler (J. Appl. Phys. 91, 984,
    2002), fit to guided-ion-beam measurements of Xe+ + Xe:
    sigma = (87.3 - 13.6 log10 E) 1e-20 m^2 with E the ion energy in the
    neutral frame [eV] (coefficients from memory).
Charge exchange, krypton
    No fit at hand: xenon's fit scaled by 0.75, the ratio of resonant
    charge-exchange cross-sections of Kr and Xe near 100 eV recalled from the
    literature (assumption, from memory; uncertain to ~30 %).
Elastic (polarization) momentum transfer
    Langevin capture rate k_L = 2 pi sqrt(alpha e^2 / (4 pi eps0 mu)),
    independent of the speed (Langevin 1905; e.g. Lieberman and Lichtenberg,
    *Principles of Plasma Discharges*, ch. 3), with mu = M / 2 and the static
    dipole polarizabilities alpha = 4.044 A^3 (Xe) and 2.484 A^3 (Kr) from the
    CRC Handbook of Chemistry and Physics (from memory).

The momentum lost by the ions per unit volume is
n_i n_n (sigma_cx(E) g + k_L)(u_i - u_n), g the relative speed including the
neutral thermal spread.
"""

from __future__ import annotations

import math

import numpy as np

from .. import constants
from ..exceptions import InputDataError
from ..propellants import Propellant, get_propellant

__all__ = ["CHARGE_EXCHANGE_FITS", "charge_exchange_cross_section", "langevin_rate"]

#: sigma = (a - b log10 E[eV]) [m^2] per propellant (sources in the module docstring).
CHARGE_EXCHANGE_FITS: dict[str, tuple[float, float]] = {
    "xenon": (87.3e-20, 13.6e-20),
    "krypton": (0.75 * 87.3e-20, 0.75 * 13.6e-20),
}
#: Static dipole polarizability [m^3] (CRC Handbook, from memory).
POLARIZABILITY_M3: dict[str, float] = {"xenon": 4.044e-30, "krypton": 2.484e-30}


def _prop(propellant: str | Propellant) -> Propellant:
    prop = get_propellant(propellant)
    if prop.name not in CHARGE_EXCHANGE_FITS:
        raise InputDataError(
            f"propellant: no ion-neutral cross-sections for {prop.name!r}; the built-in "
            f"solver supports {sorted(CHARGE_EXCHANGE_FITS)}."
        )
    return prop


def charge_exchange_cross_section(
    propellant: str | Propellant, energy_eV: np.ndarray | float
) -> np.ndarray:
    """Resonant charge-exchange cross-section [m^2] at ion energy E [eV] (E >= 0.1 eV)."""
    a, b = CHARGE_EXCHANGE_FITS[_prop(propellant).name]
    e = np.maximum(np.asarray(energy_eV, dtype=float), 0.1)
    return np.maximum(a - b * np.log10(e), 0.0)


def langevin_rate(propellant: str | Propellant) -> float:
    """Langevin (polarization) ion-neutral rate coefficient [m^3/s]."""
    prop = _prop(propellant)
    mu = 0.5 * prop.mass_kg
    alpha = POLARIZABILITY_M3[prop.name]
    return 2.0 * math.pi * math.sqrt(
        alpha * constants.e**2 / (4.0 * math.pi * constants.epsilon_0 * mu)
    )
