"""Channel-wall physics: secondary-electron yield, sheath and wall fluxes.

Sources
-------
Secondary-electron yield
    Power-law fits sigma(E) = a E^b of the total yield of ceramic wall
    materials under electron impact at primary energy E [eV], measured by
    Dunaevsky, Raitses and Fisch (Phys. Plasmas 10, 2574, 2003) and
    tabulated for thruster modelling in Goebel and Katz 2008,
    *Fundamentals of Electric Propulsion*, ch. 7 (coefficients recalled from
    that table, "from memory"). Averaged over the flux of a Maxwellian at
    temperature T_e the power law gives sigma(T_e) = Gamma(2 + b) a T_e^b.
Space-charge saturation
    Hobbs and Wesson (Plasma Physics 9, 85, 1967): the sheath stays
    monotonic only up to sigma* = 1 - 8.3 sqrt(m_e / M); the effective
    yield is capped there.
Floating sheath
    Hobbs and Wesson 1967: with yield sigma the wall floats at
    phi_s = T_e ln((1 - sigma) sqrt(M / (2 pi m_e))) below the sheath edge;
    ions enter the sheath at the Bohm speed sqrt(e T_e / M) with the
    pre-sheath density exp(-1/2) n_e (isothermal Boltzmann electrons).
"""

from __future__ import annotations

import math

import numpy as np

from .. import constants
from ..exceptions import InputDataError

__all__ = [
    "PRESHEATH_DENSITY_FACTOR",
    "WALL_YIELD_FITS",
    "bohm_wall_flux",
    "floating_sheath_potential",
    "saturated_yield",
    "secondary_yield",
]

#: Power-law yield fits (a [eV^-b], b) per wall material (sources in the module docstring).
WALL_YIELD_FITS: dict[str, tuple[float, float]] = {
    "boron_nitride": (0.150, 0.549),
    "alumina": (0.145, 0.650),
    "borosil": (0.123, 0.528),
}

#: Density at the sheath edge over the bulk density, exp(-1/2) (Bohm pre-sheath).
PRESHEATH_DENSITY_FACTOR = math.exp(-0.5)


def saturated_yield(ion_mass_kg: float) -> float:
    """Space-charge-saturated yield 1 - 8.3 sqrt(m_e / M) (Hobbs and Wesson 1967) [-]."""
    return 1.0 - 8.3 * math.sqrt(constants.m_e / ion_mass_kg)


def yield_law(material: str, constant_yield: float = 0.5) -> tuple[float, float]:
    """(prefactor, exponent) with sigma(T_e) = prefactor T_e^exponent (before the cap).

    ``"constant"`` returns (``constant_yield``, 0).
    """
    if material == "constant":
        return float(constant_yield), 0.0
    if material not in WALL_YIELD_FITS:
        raise InputDataError(
            f"wall_material: no yield fit for {material!r}; use one of "
            f"{sorted(WALL_YIELD_FITS)} or 'constant'."
        )
    a, b = WALL_YIELD_FITS[material]
    return a * math.gamma(2.0 + b), b


def secondary_yield(
    material: str, temperature_eV: np.ndarray | float, ion_mass_kg: float,
    constant_yield: float = 0.5,
) -> np.ndarray:  # fmt: skip
    """Effective secondary-electron yield of the wall at T_e [eV], capped at saturation.

    Parameters
    ----------
    material : str
        ``"boron_nitride"``, ``"alumina"``, ``"borosil"`` or ``"constant"``.
    temperature_eV : array_like
        Electron temperature [eV].
    ion_mass_kg : float
        Ion mass [kg] (sets the space-charge-saturated cap).
    constant_yield : float, default=0.5
        The yield of the ``"constant"`` material.
    """
    pre, exp = yield_law(material, constant_yield)
    t = np.asarray(temperature_eV, dtype=float)
    return np.minimum(pre * t**exp, saturated_yield(ion_mass_kg))


def floating_sheath_potential(
    temperature_eV: np.ndarray | float, sigma: np.ndarray | float, ion_mass_kg: float
) -> np.ndarray:
    """Floating wall potential below the sheath edge [V] (Hobbs and Wesson 1967)."""
    t = np.asarray(temperature_eV, dtype=float)
    s = np.asarray(sigma, dtype=float)
    ratio = (1.0 - s) * np.sqrt(ion_mass_kg / (2.0 * np.pi * constants.m_e))
    return t * np.log(ratio)


def bohm_wall_flux(
    density_m3: np.ndarray | float, temperature_eV: np.ndarray | float, ion_mass_kg: float
) -> np.ndarray:
    """Ion flux into a wall exp(-1/2) n sqrt(e T_e / M) [m^-2 s^-1]."""
    n = np.asarray(density_m3, dtype=float)
    t = np.asarray(temperature_eV, dtype=float)
    return PRESHEATH_DENSITY_FACTOR * n * np.sqrt(constants.e * t / ion_mass_kg)
